package recipe

import (
	"hystd/acq/check"
	"hystd/configs"
)

// init lets `hystd check` validate recipe files on their own (no fixture:
// the limits are checked when a recipe is submitted to one).
func init() {
	check.Register(Kind, func(doc *configs.Doc) error {
		_, err := FromDoc(doc, nil)
		return err
	})
}
