package grade

import (
	"context"
	"fmt"
	"io"
	"io/fs"
	"math"
	"os"
	"sort"
	"strings"

	"hystd/acq/record"
	"hystd/calib/units"
	"hystd/configs"
)

// Set is a collection of grades by name.
type Set map[string]Grade

// LoadDir reads every *.yaml / *.yml file of dir whose kind is grade. Files
// of other kinds are skipped; a bad grade file or a name given twice is an error.
func LoadDir(dir string) (Set, error) {
	return LoadFS(os.DirFS(dir), ".", dir)
}

// LoadFS is LoadDir on a file system; shown names file paths in errors.
func LoadFS(fsys fs.FS, dir, shown string) (Set, error) {
	docs, err := configs.ParseKindDir(fsys, dir, shown, Kind)
	if err != nil {
		return nil, err
	}
	set := Set{}
	from := map[string]string{}
	for _, doc := range docs {
		file := doc.File
		g, err := FromDoc(doc)
		if err != nil {
			return nil, err
		}
		if prev, dup := from[g.Name]; dup {
			return nil, doc.Errorf("name", "grade %q is also defined in %s", g.Name, prev)
		}
		set[g.Name], from[g.Name] = g, file
	}
	return set, nil
}

// Names returns the grade names, sorted.
func (s Set) Names() []string {
	out := make([]string, 0, len(s))
	for n := range s {
		out = append(out, n)
	}
	sort.Strings(out)
	return out
}

// Lookup returns the grade called name; "" returns nil without error.
func (s Set) Lookup(name string) (*Grade, error) {
	if name == "" {
		return nil, nil
	}
	g, ok := s[name]
	if !ok {
		return nil, fmt.Errorf("grade %q is not among the known grades %v", name, s.Names())
	}
	return &g, nil
}

// Writer judges every loop against Grade (when not nil) before handing it
// to the wrapped record.Writer, so the verdicts are stored with the loop in
// the same transaction. Rule overrides the grade's own rule when not "".
type Writer struct {
	record.Writer
	Grade *Grade
	Rule  string
}

// AddLoop sets l.Verdicts and stores l.
func (w Writer) AddLoop(ctx context.Context, l record.Loop) error {
	if w.Grade != nil {
		l.Verdicts = w.Grade.Judge(l, w.Rule)
	}
	return w.Writer.AddLoop(ctx, l)
}

// Print writes each loop's verdicts, one line per limit, and the loop's
// overall outcome (fail if any failed, else undecided if any is, else pass).
// Loops without verdicts are skipped; nothing is written when none has any.
func Print(w io.Writer, loops []record.Loop) {
	for _, l := range loops {
		if len(l.Verdicts) == 0 {
			continue
		}
		v0 := l.Verdicts[0]
		fmt.Fprintf(w, "\nloop %d against grade %s (rule %s): %s\n", l.N, v0.Grade, v0.Rule, strings.ToUpper(string(record.Worst(l.Verdicts))))
		for _, v := range l.Verdicts {
			vs, us := units.Rounded(v.Value, v.U)
			fmt.Fprintf(w, "  %-10s %-9s %s ± %s %s, limit %s", v.Figure, v.Outcome, vs, us, v.Unit, Bounds(v))
			if v.Note != "" {
				fmt.Fprintf(w, "  (%s)", v.Note)
			}
			fmt.Fprintln(w)
		}
	}
}

// Bounds formats a verdict's limits, e.g. "≤ 52", "≥ 1.45", "0.9 … 1.1".
func Bounds(v record.Verdict) string {
	switch {
	case !math.IsNaN(v.Min) && !math.IsNaN(v.Max):
		return fmt.Sprintf("%g … %g", v.Min, v.Max)
	case !math.IsNaN(v.Min):
		return fmt.Sprintf("≥ %g", v.Min)
	case !math.IsNaN(v.Max):
		return fmt.Sprintf("≤ %g", v.Max)
	}
	return "none"
}
