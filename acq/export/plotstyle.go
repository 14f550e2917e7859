package export

import (
	"fmt"

	"hystd/acq/plot"
)

// PlotStyle is how a loop plot is drawn, as the user names it: the same
// three names and values for `hystd export --y --units --quadrant` and the
// API's plot query ?y=&units=&quadrant=.
type PlotStyle struct {
	Y        string // "B" (or "") or "J"
	Units    string // "si" (or "") or "cgs": H in Oe, B and J in G or kG
	Quadrant string // "" (the whole loop) or "2": H ≤ 0, B ≥ 0, B and J with (BH)max marked
}

// Options returns the drawing options for the style, leaving size, title
// and labels to the caller. The error names the parameter, its value and
// what it may be (`y: "H": want B or J`), so a caller only prefixes "--"
// or nothing.
func (s PlotStyle) Options() (plot.Options, error) {
	var o plot.Options
	switch s.Y {
	case "", "B":
		o.Y = plot.FluxDensity
	case "J":
		o.Y = plot.Polarization
	default:
		return o, fmt.Errorf("y: %q: want B or J", s.Y)
	}
	switch s.Units {
	case "", "si":
	case "cgs":
		o.CGS = true
	default:
		return o, fmt.Errorf("units: %q: want si or cgs", s.Units)
	}
	switch s.Quadrant {
	case "":
	case "2":
		o.SecondQuadrant = true
	default:
		return o, fmt.Errorf("quadrant: %q: want 2 or nothing", s.Quadrant)
	}
	return o, nil
}
