package recipe

import (
	"fmt"
	"math"
	"strconv"
	"strings"

	"go.yaml.in/yaml/v3"

	"hystd/calib/units"
	"hystd/configs"
)

// Unit names of levels: a current in A or a field strength H in A/m.
const (
	UnitA   = "A"
	UnitApm = "A/m"
)

// Level is a current (A) or a field strength (A/m), written in a recipe as a
// string with its unit: "2.5 A", "500 mA", "1.2 kA/m", "-800 kA/m",
// "1.6 MA/m". A bare number is an error: it could be either.
type Level struct {
	Value float64 // in Unit, SI (A or A/m)
	Unit  string  // UnitA or UnitApm
}

// Rate is a sweep rate in A/s or A/m per second, written "5 A/s",
// "2 kA/m/s". A bare number is an error.
type Rate struct {
	Value float64 // in Unit per second, SI
	Unit  string  // UnitA or UnitApm (per second)
}

func (l Level) String() string { return fmtSI(l.Value, l.Unit) }
func (r Rate) String() string  { return fmtSI(r.Value, r.Unit) + "/s" }

// fmtSI prints v with an SI prefix chosen for 1 ≤ |mantissa| < 1000.
func fmtSI(v float64, unit string) string {
	a := math.Abs(v)
	switch {
	case a >= 1e6:
		return strconv.FormatFloat(v/1e6, 'g', 6, 64) + " M" + unit
	case a >= 1e3:
		return strconv.FormatFloat(v/1e3, 'g', 6, 64) + " k" + unit
	case a >= 1e-3 && a < 1:
		return strconv.FormatFloat(v*1e3, 'g', 6, 64) + " m" + unit
	}
	return strconv.FormatFloat(v, 'g', 6, 64) + " " + unit
}

// prefixes are the SI prefixes a recipe's levels and rates may carry.
var prefixes = map[string]bool{"": true, "m": true, "k": true, "M": true}

// parseAmount splits "1.2 kA/m" into 1200 and "A/m". perSecond asks for a
// rate ("…/s"). The number and the prefix are read by the grammar of every
// quantity (units.SplitNumber, units.Scale); a recipe asks in addition for
// a unit, A or A/m, with an optional m, k or M prefix.
func parseAmount(s string, perSecond bool) (float64, string, error) {
	s = strings.TrimSpace(s)
	num, rest := units.SplitNumber(s)
	if !strings.ContainsAny(num, "0123456789") {
		return 0, "", fmt.Errorf("%q does not start with a number", s)
	}
	v, err := strconv.ParseFloat(num, 64)
	if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
		return 0, "", fmt.Errorf("%q is not a number", num)
	}
	want := "A or A/m, e.g. \"2 A\" or \"1.5 kA/m\""
	if perSecond {
		want = "A/s or A/m/s, e.g. \"5 A/s\" or \"2 kA/m/s\""
		if !strings.HasSuffix(rest, "/s") {
			return 0, "", fmt.Errorf("%q has no rate unit; write %s", s, want)
		}
		rest = strings.TrimSuffix(rest, "/s")
	}
	if rest == "" {
		return 0, "", fmt.Errorf("%q has no unit; write %s", s, want)
	}
	var unit string
	switch {
	case strings.HasSuffix(rest, UnitApm):
		unit = UnitApm
	case strings.HasSuffix(rest, UnitA):
		unit = UnitA
	default:
		return 0, "", fmt.Errorf("unit %q of %q is not %s", rest, s, want)
	}
	si, ok := units.Scale(v, rest, unit)
	if !ok || !prefixes[strings.TrimSuffix(rest, unit)] {
		return 0, "", fmt.Errorf("unit %q of %q: prefix not one of m, k, M; write %s", rest, s, want)
	}
	return si, unit, nil
}

func scalar(n *yaml.Node) (string, error) {
	if n.Kind != yaml.ScalarNode {
		return "", configs.ValueError(n, "want a value with a unit, e.g. \"1.5 kA/m\"")
	}
	if n.Tag != "!!str" {
		return "", configs.ValueError(n, "%s has no unit; write it with one, e.g. \"%s A\" or \"%s A/m\"", n.Value, n.Value, n.Value)
	}
	return n.Value, nil
}

// UnmarshalYAML implements yaml.Unmarshaler.
func (l *Level) UnmarshalYAML(n *yaml.Node) error {
	s, err := scalar(n)
	if err != nil {
		return err
	}
	v, u, err := parseAmount(s, false)
	if err != nil {
		return configs.ValueError(n, "%v", err)
	}
	*l = Level{Value: v, Unit: u}
	return nil
}

// UnmarshalYAML implements yaml.Unmarshaler.
func (r *Rate) UnmarshalYAML(n *yaml.Node) error {
	s, err := scalar(n)
	if err != nil {
		return err
	}
	v, u, err := parseAmount(s, true)
	if err != nil {
		return configs.ValueError(n, "%v", err)
	}
	*r = Rate{Value: v, Unit: u}
	return nil
}

// MarshalYAML implements yaml.Marshaler.
func (l Level) MarshalYAML() (any, error) { return l.String(), nil }

// MarshalYAML implements yaml.Marshaler.
func (r Rate) MarshalYAML() (any, error) { return r.String(), nil }

// Induction is a flux density or polarization in tesla, written "1.5 T",
// "800 mT" or "20 mT". A bare number is an error.
type Induction float64

// String prints the induction with its unit.
func (b Induction) String() string { return fmtSI(float64(b), "T") }

// UnmarshalYAML implements yaml.Unmarshaler.
func (b *Induction) UnmarshalYAML(n *yaml.Node) error {
	if n.Kind != yaml.ScalarNode {
		return configs.ValueError(n, "want an induction with its unit, e.g. \"1.5 T\"")
	}
	if n.Tag != "!!str" {
		return configs.ValueError(n, "%s has no unit; write it in T, e.g. \"%s T\"", n.Value, n.Value)
	}
	s := strings.TrimSpace(n.Value)
	num, unit := units.SplitNumber(s)
	v, err := strconv.ParseFloat(num, 64)
	if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
		return configs.ValueError(n, "%q does not start with a number", s)
	}
	switch unit {
	case "T", "mT":
		v, _ = units.Scale(v, unit, units.SymTesla)
	case "":
		return configs.ValueError(n, "%q has no unit; write it in T, e.g. \"1.5 T\" or \"800 mT\"", s)
	default:
		return configs.ValueError(n, "unit %q of %q is not T or mT", unit, s)
	}
	*b = Induction(v)
	return nil
}

// MarshalYAML implements yaml.Marshaler.
func (b Induction) MarshalYAML() (any, error) { return b.String(), nil }
