// Package uncert holds an uncertainty budget in the manner of the GUM (JCGM
// 100:2008): uncorrelated components, each a standard uncertainty already
// multiplied by its sensitivity (so in the unit of the result), combined by
// root sum of squares and expanded with a coverage factor k.
package uncert

import (
	"fmt"
	"math"
	"sort"
	"strings"
)

// K is the coverage factor used throughout hystd: k = 2, about 95 % for a
// normal distribution (GUM §6.3).
const K = 2.0

// Component is one contribution to a budget: U is a standard uncertainty in
// the unit of the result.
type Component struct {
	Name string
	U    float64
	Note string // how it was evaluated (Type A or B, source)
}

// Budget is the uncertainty budget of one result.
type Budget struct {
	Components []Component
}

// Add appends a component; NaN or negative values are ignored, as are
// exact zeros (they carry nothing).
func (b *Budget) Add(name string, u float64, note string) {
	if math.IsNaN(u) || math.IsInf(u, 0) || u <= 0 {
		return
	}
	b.Components = append(b.Components, Component{Name: name, U: u, Note: note})
}

// Combined returns the combined standard uncertainty u_c = √Σu².
func (b Budget) Combined() float64 {
	s := 0.0
	for _, c := range b.Components {
		s += c.U * c.U
	}
	return math.Sqrt(s)
}

// Expanded returns U = K·u_c.
func (b Budget) Expanded() float64 { return K * b.Combined() }

// Dominant returns the components ordered from largest to smallest.
func (b Budget) Dominant() []Component {
	out := append([]Component(nil), b.Components...)
	sort.SliceStable(out, func(i, j int) bool { return out[i].U > out[j].U })
	return out
}

// Summary prints the components largest first as "name u, name u" with 2
// significant figures, for a figure's note.
func (b Budget) Summary(unit string) string {
	var parts []string
	for _, c := range b.Dominant() {
		parts = append(parts, fmt.Sprintf("%s %.2g", c.Name, c.U))
	}
	if len(parts) == 0 {
		return "no component evaluated"
	}
	return "u(k=1) " + unit + ": " + strings.Join(parts, ", ")
}

// En returns the normalized error |x1 − x2|/√(U1² + U2²) of two results with
// expanded uncertainties U1, U2 (ISO 13528); |En| ≤ 1 means they agree
// within their uncertainties, e.g. Hc and Br at the full and at half the
// sweep rate in the quasi-static check. NaN when both U are zero.
func En(x1, u1, x2, u2 float64) float64 {
	d := math.Hypot(u1, u2)
	if d == 0 {
		return math.NaN()
	}
	return math.Abs(x1-x2) / d
}
