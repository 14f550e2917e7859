// Package check validates configuration files of any kind, as `hystd check`
// does: it reads the file's `kind:` and hands the document to that kind's
// strict loader, then checks what one file cannot know alone (a fixture's
// limits against its instruments' profiles).
package check

import (
	"errors"
	"fmt"
	"os"
	"sort"
	"strings"

	"hystd/acq/config"
	"hystd/configs"
)

// Validator validates one parsed document of a kind.
type Validator func(doc *configs.Doc) error

// kinds maps a document kind to its validator.
var kinds = map[string]Validator{
	"fixture":  validateFixture,
	"specimen": func(doc *configs.Doc) error { _, err := config.SpecimenFrom(doc); return err },
}

// File validates the file at path. The error lists every problem found, one
// per line, as FILE:LINE: key: problem.
func File(path string) error {
	data, err := os.ReadFile(path)
	if err != nil {
		return err
	}
	return Bytes(path, data)
}

// Bytes validates data as if read from file.
func Bytes(file string, data []byte) error {
	doc, err := configs.Parse(file, data)
	if err != nil {
		return err
	}
	k := doc.Kind()
	v, ok := kinds[k]
	if !ok {
		names := make([]string, 0, len(kinds))
		for n := range kinds {
			names = append(names, n)
		}
		sort.Strings(names)
		if k == "" {
			return doc.Errorf("kind", "missing; one of %s", strings.Join(names, ", "))
		}
		return doc.Errorf("kind", "unknown kind %q; one of %s", k, strings.Join(names, ", "))
	}
	return v(doc)
}

// ProfileRange returns the settable current range [min, max] in A of the
// supply profile named name; set by the package that loads profiles.
var ProfileRange func(name string) (lo, hi float64, err error)

func validateFixture(doc *configs.Doc) error {
	f, err := config.FixtureFrom(doc)
	if err != nil {
		return err
	}
	var es configs.Errors
	if s, ok := f.Instruments[config.RoleSupply]; ok && ProfileRange != nil {
		lo, hi, err := ProfileRange(s.Profile)
		switch {
		case err != nil:
			es = append(es, doc.Errorf("instruments.supply.profile", "%v", err))
		case f.Limits.MaxCurrentA > hi || -f.Limits.MaxCurrentA < lo:
			es = append(es, doc.Errorf("limits.max_current_a",
				"%g A is beyond what supply profile %q can set (%g A to %g A)", f.Limits.MaxCurrentA, s.Profile, lo, hi))
		}
	}
	return es.Err()
}

// Files validates every path and returns one error joining all problems, or nil.
func Files(paths []string) error {
	var all []error
	for _, p := range paths {
		if err := File(p); err != nil {
			all = append(all, err)
		}
	}
	return errors.Join(all...)
}

// Register adds the validator of a kind; packages defining a kind call it.
func Register(kind string, v Validator) {
	if _, dup := kinds[kind]; dup {
		panic(fmt.Sprintf("check: kind %q registered twice", kind))
	}
	kinds[kind] = v
}
