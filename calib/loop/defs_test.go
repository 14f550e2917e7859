package loop

import "testing"

// TestDefs: every figure name is declared once, with a label, a symbol and a
// way it is computed; the figures Figures returns are in the table's order.
func TestDefs(t *testing.T) {
	seen := map[string]bool{}
	for _, d := range Defs {
		if seen[d.Name] {
			t.Errorf("%s declared twice", d.Name)
		}
		seen[d.Name] = true
		if d.Label == "" || d.Symbol == "" || d.How == "" {
			t.Errorf("%s: label %q, symbol %q, how %q", d.Name, d.Label, d.Symbol, d.How)
		}
		if d.Class != "" && d.Class != ClassSoft && d.Class != ClassMagnet {
			t.Errorf("%s: class %q", d.Name, d.Class)
		}
	}
	for _, n := range []string{FigHmax, FigBmax, FigBr, FigHcB, FigHcJ, FigMuA, FigMuInitial, FigMuMax, FigHMuMax,
		FigLossJM3, FigLossJKg, FigBHmax, FigBHmaxB, FigBHmaxH, FigHk, FigSquareness, FigMuRec,
		FigDriveAmplitude, FigPeakTarget} {
		if !seen[n] {
			t.Errorf("figure %s has no declaration in Defs", n)
		}
	}
	if len(order) != len(Defs)-4 {
		t.Errorf("order %v", order)
	}
}
