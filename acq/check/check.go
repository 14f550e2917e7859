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
	"hystd/acq/grade"
	"hystd/acq/influx"
	"hystd/configs"
	"hystd/drivers/profile"
	"hystd/drivers/sim"
)

// Validator validates one parsed document of a kind.
type Validator func(doc *configs.Doc) error

// kinds maps a document kind to its validator.
var kinds = map[string]Validator{
	"fixture":            validateFixture,
	"specimen":           func(doc *configs.Doc) error { _, err := config.SpecimenFrom(doc); return err },
	"instrument-profile": func(doc *configs.Doc) error { _, err := profile.FromDoc(doc); return err },
	"bench":              func(doc *configs.Doc) error { _, err := sim.BenchFrom(doc); return err },
	"influx":             func(doc *configs.Doc) error { _, err := influx.ConfigFrom(doc); return err },
	"grade":              func(doc *configs.Doc) error { _, err := grade.FromDoc(doc); return err },
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

func validateFixture(doc *configs.Doc) error {
	f, err := config.FixtureFrom(doc)
	if err != nil {
		return err
	}
	var es configs.Errors
	for role, in := range f.Instruments {
		p, err := profile.Load(in.Profile)
		if err != nil {
			es = append(es, doc.Errorf("instruments."+role+".profile", "%v", err))
			continue
		}
		if p.Role != role {
			es = append(es, doc.Errorf("instruments."+role+".profile", "profile %s is for a %s, not a %s", p.Name, p.Role, role))
			continue
		}
		if role != config.RoleSupply {
			continue
		}
		// The fixture may not promise more current than the supply can be set to.
		if r := p.Operations[profile.OpSetCurrent].Range; len(r) == 2 &&
			(f.Limits.MaxCurrentA > r[1] || -f.Limits.MaxCurrentA < r[0]) {
			es = append(es, doc.Errorf("limits.max_current_a",
				"%g A is beyond what supply profile %s can set (%g A to %g A)", f.Limits.MaxCurrentA, p.Name, r[0], r[1]))
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

// Register adds the validator of a kind. Packages of acq that define a kind
// call it from an init function; kinds defined below acq (instrument
// profiles, benches) are listed above.
func Register(kind string, v Validator) {
	if _, dup := kinds[kind]; dup {
		panic(fmt.Sprintf("check: kind %q registered twice", kind))
	}
	kinds[kind] = v
}
