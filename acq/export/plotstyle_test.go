package export_test

import (
	"testing"

	"hystd/acq/export"
	"hystd/acq/plot"
)

// TestPlotStyle: the names and values shared by `hystd export` and the
// API's plot query; a bad value is an error naming the parameter.
func TestPlotStyle(t *testing.T) {
	for _, tc := range []struct {
		in   export.PlotStyle
		want plot.Options
		err  string
	}{
		{export.PlotStyle{}, plot.Options{Y: plot.FluxDensity}, ""},
		{export.PlotStyle{Y: "B", Units: "si"}, plot.Options{Y: plot.FluxDensity}, ""},
		{export.PlotStyle{Y: "J", Units: "cgs", Quadrant: "2"}, plot.Options{Y: plot.Polarization, CGS: true, SecondQuadrant: true}, ""},
		{export.PlotStyle{Y: "b"}, plot.Options{}, `y: "b": want B or J`},
		{export.PlotStyle{Units: "CGS"}, plot.Options{}, `units: "CGS": want si or cgs`},
		{export.PlotStyle{Quadrant: "II"}, plot.Options{}, `quadrant: "II": want 2 or nothing`},
	} {
		got, err := tc.in.Options()
		if tc.err != "" {
			if err == nil || err.Error() != tc.err {
				t.Errorf("%+v: error %v, want %q", tc.in, err, tc.err)
			}
			continue
		}
		if err != nil || got.Y != tc.want.Y || got.CGS != tc.want.CGS || got.SecondQuadrant != tc.want.SecondQuadrant {
			t.Errorf("%+v: %+v, %v; want %+v", tc.in, got, err, tc.want)
		}
	}
}
