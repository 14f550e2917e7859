package configs

import (
	"strings"
	"testing"
)

type flowT struct {
	Kind string `yaml:"kind"`
	W    struct {
		N1 int      `yaml:"n1"`
		N2 int      `yaml:"n2"`
		T  Duration `yaml:"t"`
	} `yaml:"w"`
}

// TestFlowMappingBlamesTheRightKey: in a one-line {…} mapping, a bad value
// is reported under its own key, not the last key on the line.
func TestFlowMappingBlamesTheRightKey(t *testing.T) {
	cases := []struct{ doc, want string }{
		{"kind: x\nw: {n1: many, n2: 3, t: 1s}\n", "f.yaml:2: w.n1: cannot unmarshal text `many` into int"},
		{"kind: x\nw: {n1: 1, n2: 3, t: 5}\n", `f.yaml:2: w.t: duration "5" has no unit`},
		{"kind: x\nw: {n1: 1, n3: 3}\n", `f.yaml:2: w.n3: unknown key (did you mean "n1"?)`},
	}
	for _, tc := range cases {
		d, err := Parse("f.yaml", []byte(tc.doc))
		if err != nil {
			t.Fatal(err)
		}
		var v flowT
		err = d.Decode(&v)
		if err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%q: got %v, want %s", tc.doc, err, tc.want)
		}
	}
}

func TestDuration(t *testing.T) {
	for _, tc := range []struct {
		in   string
		ok   bool
		want string
	}{
		{`"500ms"`, true, "500ms"}, {"2s", true, "2s"}, {"5", false, "no unit"}, {`"fast"`, false, "not a duration"},
	} {
		d, err := Parse("f.yaml", []byte("kind: x\nw: {t: "+tc.in+"}\n"))
		if err != nil {
			t.Fatal(err)
		}
		var v flowT
		err = d.Decode(&v)
		if tc.ok && (err != nil || v.W.T.D().String() != tc.want) {
			t.Errorf("%s: %v %v", tc.in, v.W.T.D(), err)
		}
		if !tc.ok && (err == nil || !strings.Contains(err.Error(), tc.want)) {
			t.Errorf("%s: got %v, want %q", tc.in, err, tc.want)
		}
	}
}
