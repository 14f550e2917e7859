package profile

import (
	"errors"
	"math"
	"sort"
	"testing"

	"hystd/configs"
	"hystd/drivers/scpi"
)

// numericOps lists every numeric query of every shipped profile, in a
// fixed order.
func numericOps(t testing.TB) []Operation {
	var out []Operation
	for _, n := range Names() {
		p, err := Load(n)
		if err != nil {
			t.Fatal(err)
		}
		keys := make([]string, 0, len(p.Operations))
		for k := range p.Operations {
			keys = append(keys, k)
		}
		sort.Strings(keys)
		for _, k := range keys {
			o := p.Operations[k]
			if o.Query != "" && (o.Parse == "number" || o.Parse == "number-unit" || len(o.Parse) > 6 && o.Parse[:6] == "field:") {
				out = append(out, o)
			}
		}
	}
	return out
}

// FuzzParseReply feeds arbitrary replies to the reply parser of every
// numeric operation: it must return a finite SI value inside the
// operation's range, or a typed error (parse, overrange, range).
func FuzzParseReply(f *testing.F) {
	for _, s := range []string{"1.5", "-9.9E37", "9.91E37", "12.5 mT", "1500 G", "0,1250.0", "0,", ",", "1e400 T", "0,9.9E37,1"} {
		f.Add(s, uint8(0))
		f.Add(s, uint8(7))
	}
	ops := numericOps(f)
	f.Fuzz(func(t *testing.T, reply string, which uint8) {
		o := ops[int(which)%len(ops)]
		v, err := parseNumeric(o, reply)
		if err != nil {
			var pe *scpi.ParseError
			var re *RangeError
			if !errors.As(err, &pe) && !errors.Is(err, ErrOverrange) && !errors.As(err, &re) {
				t.Fatalf("%s %q: untyped error %v", o.Query, reply, err)
			}
			return
		}
		if math.IsNaN(v) || math.IsInf(v, 0) {
			t.Fatalf("%s %q: non-finite %v", o.Query, reply, v)
		}
		if len(o.Range) == 2 && (v < o.Range[0] || v > o.Range[1]) {
			t.Fatalf("%s %q: %v outside %v", o.Query, reply, v, o.Range)
		}
	})
}

// FuzzParseProfile: any YAML gives a profile or an error, never a panic,
// and an accepted profile passes Validate again.
func FuzzParseProfile(f *testing.F) {
	for _, n := range Names() {
		data, err := configs.Samples.ReadFile("instruments/" + n + ".yaml")
		if err != nil {
			f.Fatal(err)
		}
		f.Add(data)
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		p, err := Parse("fuzz.yaml", data)
		if err != nil {
			return
		}
		if err := Validate(p); err != nil {
			t.Fatalf("accepted profile fails Validate: %v", err)
		}
	})
}
