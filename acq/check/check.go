// Package check validates configuration files of any kind, as `hystd check`
// does: it reads the file's `kind:` and hands the document to that kind's
// strict loader, then checks what one file cannot know alone (a fixture's
// limits against its instruments' profiles).
package check

import (
	"fmt"
	"sort"
	"strings"

	"hystd/acq/config"
	"hystd/acq/grade"
	"hystd/acq/influx"
	"hystd/acq/process"
	"hystd/acq/recipe"
	"hystd/configs"
	"hystd/drivers/instr"
	"hystd/drivers/profile"
	"hystd/drivers/sim"
)

// Validator validates one parsed document of a kind.
type Validator func(doc *configs.Doc) error

// Warner returns the warnings of a document of a kind that validated:
// settings that are allowed but probably wrong (a strip length in m that
// looks like one in mm). Each is an Error whose Problem starts "warning: ".
type Warner func(doc *configs.Doc) configs.Errors

// warners maps a document kind to its warner.
var warners = map[string]Warner{
	"specimen": specimenWarnings,
	// A recipe on its own: no fixture, so the limits are checked when it is
	// submitted to one.
	recipe.Kind: func(doc *configs.Doc) configs.Errors {
		r, err := recipe.FromDoc(doc, nil)
		if err != nil {
			return nil
		}
		return r.Warnings()
	},
}

// kinds maps a document kind to its validator.
var kinds = map[string]Validator{
	"fixture":            validateFixture,
	"specimen":           func(doc *configs.Doc) error { _, err := config.SpecimenFrom(doc); return err },
	"instrument-profile": func(doc *configs.Doc) error { _, err := profile.FromDoc(doc); return err },
	"bench":              func(doc *configs.Doc) error { _, err := sim.BenchFrom(doc); return err },
	"influx":             func(doc *configs.Doc) error { _, err := influx.ConfigFrom(doc); return err },
	"grade":              func(doc *configs.Doc) error { _, err := grade.FromDoc(doc); return err },
	recipe.Kind:          func(doc *configs.Doc) error { _, err := recipe.FromDoc(doc, nil); return err },
}

// Report validates the file at path like File and, when it is valid,
// returns its warnings as FILE:LINE: key: warning: problem.
func Report(path string) (configs.Errors, error) {
	data, err := configs.ReadFile(path)
	if err != nil {
		return nil, err
	}
	return BytesReport(path, data)
}

// Bytes validates data as if read from file.
func Bytes(file string, data []byte) error {
	_, err := BytesReport(file, data)
	return err
}

// BytesReport is Report on data as if read from file.
func BytesReport(file string, data []byte) (configs.Errors, error) {
	doc, err := configs.Parse(file, data)
	if err != nil {
		return nil, err
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
			return nil, doc.Errorf("kind", "missing; one of %s", strings.Join(names, ", "))
		}
		return nil, doc.Errorf("kind", "unknown kind %q; one of %s", k, strings.Join(names, ", "))
	}
	if err := v(doc); err != nil {
		return nil, err
	}
	if w := warners[k]; w != nil {
		return w(doc), nil
	}
	return nil, nil
}

// Warning builds a warning for the key at path of doc.
func Warning(doc *configs.Doc, path, format string, args ...any) *configs.Error {
	e := doc.Errorf(path, format, args...)
	e.Problem = "warning: " + e.Problem
	return e
}

// specimenWarnings are the geometry's warnings of a specimen on its own.
func specimenWarnings(doc *configs.Doc) configs.Errors {
	sp, err := config.SpecimenFrom(doc)
	if err != nil {
		return nil
	}
	return SpecimenWarnings(doc, "", sp)
}

// SpecimenWarnings returns a specimen's geometry warnings located in doc:
// at the key they concern under prefix (the specimen's own file: ""), or at
// prefix itself when the specimen is named from another file.
func SpecimenWarnings(doc *configs.Doc, prefix string, sp config.Specimen) configs.Errors {
	g, err := process.SpecimenGeometry(sp)
	if err != nil {
		return nil
	}
	var ws configs.Errors
	for _, w := range g.Warnings {
		key := sp.Shape
		switch {
		case sp.Shape == "epstein" && strings.Contains(w, "strip length"):
			key = "epstein.strip_length_m"
		case sp.Shape == "ring" && strings.Contains(w, "OD/ID"):
			key = "ring.outer_diameter_mm"
		}
		text := strings.TrimPrefix(w, sp.Shape+": ")
		if prefix != "" {
			ws = append(ws, Warning(doc, prefix, "specimen %s: %s", sp.ID, w))
			continue
		}
		ws = append(ws, Warning(doc, key, "%s", text))
	}
	return ws
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
		if role != instr.RoleSupply {
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

// RegisterWarner adds the warner of a kind registered with Register.
func RegisterWarner(kind string, w Warner) {
	if _, dup := warners[kind]; dup {
		panic(fmt.Sprintf("check: warner of kind %q registered twice", kind))
	}
	warners[kind] = w
}

// Register adds the validator of a kind. A package above this one that
// defines a kind (acq/daemon) calls it from an init function; the kinds of
// the packages below (instrument profiles, benches, recipes…) are listed
// above.
func Register(kind string, v Validator) {
	if _, dup := kinds[kind]; dup {
		panic(fmt.Sprintf("check: kind %q registered twice", kind))
	}
	kinds[kind] = v
}
