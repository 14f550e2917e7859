package daemon

import (
	"fmt"

	"hystd/acq/api"
	"hystd/acq/check"
	"hystd/configs"
)

// init lets `hystd check` validate daemon config files, with every fixture,
// specimen and scheduled recipe they name, and users files.
func init() {
	check.Register(Kind, func(doc *configs.Doc) error {
		_, err := FromDoc(doc)
		return err
	})
	check.Register(api.UsersKind, func(doc *configs.Doc) error {
		_, err := api.UsersFrom(doc)
		return err
	})
	// Warnings: the geometry of each fixture's specimen.
	check.RegisterWarner(Kind, func(doc *configs.Doc) configs.Errors {
		l, err := FromDoc(doc)
		if err != nil {
			return nil
		}
		var ws configs.Errors
		for i, lf := range l.Fixtures {
			ws = append(ws, check.SpecimenWarnings(doc, fmt.Sprintf("fixtures.%d.specimen", i), lf.Specimen)...)
		}
		return ws
	})
}
