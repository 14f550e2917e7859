package daemon

import (
	"fmt"
	"os"
	"path/filepath"
	"sort"
	"strings"

	"hystd/acq/api"
	"hystd/acq/config"
	"hystd/acq/grade"
	"hystd/configs"
)

// ErrUnknownSpecimen: a specimen reference is neither a registered id nor a file.
var ErrUnknownSpecimen = api.ErrUnknownSpecimen

// Registry is the daemon's specimen registry and material grades, loaded
// from the folders its config names. It is immutable once loaded.
type Registry struct {
	SpecimenDir string
	GradeDir    string
	Rule        string                     // decision rule override; "" keeps each grade's own
	Specimens   map[string]config.Specimen // by id
	Files       map[string]string          // specimen id → file
	Grades      grade.Set                  // nil when no grades folder is configured
}

func loadRegistry(ce *cerr, specDir, gradeDir, rule string) Registry {
	r := Registry{SpecimenDir: specDir, GradeDir: gradeDir, Rule: rule,
		Specimens: map[string]config.Specimen{}, Files: map[string]string{}}
	switch rule {
	case "", grade.RuleGuarded, grade.RuleSimple:
	default:
		ce.add("decision_rule", "%q is not one of [%s %s]", rule, grade.RuleGuarded, grade.RuleSimple)
	}
	if gradeDir != "" {
		set, err := grade.LoadDir(gradeDir)
		if err != nil {
			ce.add("grades", "%v", err)
		} else {
			r.Grades = set
		}
	}
	if specDir != "" {
		entries, err := os.ReadDir(specDir)
		if err != nil {
			ce.add("specimens", "%v", err)
			return r
		}
		for _, e := range entries {
			n := e.Name()
			if e.IsDir() || !(strings.HasSuffix(n, ".yaml") || strings.HasSuffix(n, ".yml")) {
				continue
			}
			file := filepath.Join(specDir, n)
			data, err := os.ReadFile(file)
			if err != nil {
				ce.add("specimens", "%v", err)
				continue
			}
			doc, err := configs.Parse(file, data)
			if err != nil {
				ce.add("specimens", "%v", err)
				continue
			}
			if doc.Kind() != "specimen" {
				continue
			}
			sp, err := config.SpecimenFrom(doc)
			if err != nil {
				ce.add("specimens", "%v", err)
				continue
			}
			if prev, dup := r.Files[sp.ID]; dup {
				ce.add("specimens", "specimen %s is in both %s and %s", sp.ID, prev, file)
				continue
			}
			r.checkGrade(ce, "specimens", sp)
			r.Specimens[sp.ID], r.Files[sp.ID] = sp, file
		}
	}
	return r
}

// checkGrade reports a specimen naming a grade that the grades folder lacks.
func (r Registry) checkGrade(ce *cerr, path string, sp config.Specimen) {
	if sp.Grade == "" || r.Grades == nil {
		return
	}
	if _, err := r.Grades.Lookup(sp.Grade); err != nil {
		ce.add(path, "specimen %s: %v in %s", sp.ID, err, r.GradeDir)
	}
}

// IDs returns the registered specimen ids, sorted.
func (r Registry) IDs() []string {
	out := make([]string, 0, len(r.Specimens))
	for id := range r.Specimens {
		out = append(out, id)
	}
	sort.Strings(out)
	return out
}

// Specimen resolves ref: a registered specimen id, or else a path to a
// specimen file. The error names what was tried.
func (r Registry) Specimen(ref string) (config.Specimen, error) {
	if ref == "" {
		return config.Specimen{}, fmt.Errorf("empty specimen reference")
	}
	if sp, ok := r.Specimens[ref]; ok {
		return sp, nil
	}
	if st, err := os.Stat(ref); err == nil && !st.IsDir() {
		sp, err := config.LoadSpecimen(ref)
		if err != nil {
			return config.Specimen{}, err
		}
		if sp.Grade != "" && r.Grades != nil {
			if _, err := r.Grades.Lookup(sp.Grade); err != nil {
				return config.Specimen{}, fmt.Errorf("%s: %w", ref, err)
			}
		}
		return sp, nil
	}
	if r.SpecimenDir == "" {
		return config.Specimen{}, fmt.Errorf("%w %q: no such file, and the config names no specimens folder", ErrUnknownSpecimen, ref)
	}
	return config.Specimen{}, fmt.Errorf("%w %q: no such file, and not among the specimens of %s %v", ErrUnknownSpecimen, ref, r.SpecimenDir, r.IDs())
}

// GradeOf returns the grade sp is judged against, nil when none applies,
// and a note when sp names a grade that cannot be judged (no grades folder).
func (r Registry) GradeOf(sp config.Specimen) (*grade.Grade, string) {
	if sp.Grade == "" {
		return nil, ""
	}
	if r.Grades == nil {
		return nil, fmt.Sprintf("specimen %s names grade %s but the daemon config names no grades folder: loops are not judged", sp.ID, sp.Grade)
	}
	g, err := r.Grades.Lookup(sp.Grade)
	if err != nil {
		return nil, fmt.Sprintf("specimen %s: %v: loops are not judged", sp.ID, err)
	}
	return g, ""
}
