package daemon

import (
	"hystd/acq/check"
	"hystd/configs"
)

// init lets `hystd check` validate daemon config files, with every fixture,
// specimen and scheduled recipe they name.
func init() {
	check.Register(Kind, func(doc *configs.Doc) error {
		_, err := FromDoc(doc)
		return err
	})
}
