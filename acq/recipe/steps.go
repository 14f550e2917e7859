package recipe

import (
	"fmt"
	"strings"
)

// StepSpec is one step as written: exactly one field is set. Each field is
// a step kind, declared by its type in step_<key>.go (its YAML, its checks
// and defaults, its expansion into the plan) and by its entry in stepTable.
type StepSpec struct {
	Demagnetize *Demagnetize `yaml:"demagnetize"`
	Condition   *Condition   `yaml:"condition"`
	RecordLoop  *RecordLoop  `yaml:"record_loop"`
	NormalCurve *NormalCurve `yaml:"normal_curve"`
	DemagCurve  *DemagCurve  `yaml:"demag_curve"`
	DriftHold   *DriftHold   `yaml:"drift_hold"`
	Wait        *Wait        `yaml:"wait"`
}

// stepTable lists every step kind, in the order errors name them: its YAML
// key and its body in a StepSpec (nil when the step is of another kind).
// A new kind is a field of StepSpec, an entry here, its type in
// step_<key>.go implementing stepBody, and its test (TestStepTable checks
// that the table and StepSpec agree).
var stepTable = []struct {
	key string
	of  func(*StepSpec) stepBody
}{
	{"demagnetize", func(s *StepSpec) stepBody { return body(s.Demagnetize) }},
	{"condition", func(s *StepSpec) stepBody { return body(s.Condition) }},
	{"record_loop", func(s *StepSpec) stepBody { return body(s.RecordLoop) }},
	{"normal_curve", func(s *StepSpec) stepBody { return body(s.NormalCurve) }},
	{"demag_curve", func(s *StepSpec) stepBody { return body(s.DemagCurve) }},
	{"drift_hold", func(s *StepSpec) stepBody { return body(s.DriftHold) }},
	{"wait", func(s *StepSpec) stepBody { return body(s.Wait) }},
}

// stepBody is what a step kind does besides being decoded.
type stepBody interface {
	// check reports every problem of the step found without a fixture,
	// located under its key p ("steps.2.record_loop"), and fills the
	// step's defaults.
	check(c *stepCheck, p string)
	// expand appends the step's setpoint programs to the plan (each lists
	// itself with Step.String); src is the step's key.
	expand(x *expander, src string)
	// unit is the unit the step's levels are written in; ok is false for a
	// step that gives none (the recipe's unit then comes from a later step).
	unit() (u string, ok bool)
}

// body returns p as a stepBody, nil (not a typed nil) when p is nil.
func body[T any, P interface {
	*T
	stepBody
}](p P) stepBody {
	if p == nil {
		return nil
	}
	return p
}

// kind returns the key and body of the step's kind and the number of kinds
// set (a valid step has exactly one).
func (s *StepSpec) kind() (key string, b stepBody, n int) {
	for _, k := range stepTable {
		if v := k.of(s); v != nil {
			key, b = k.key, v
			n++
		}
	}
	return key, b, n
}

// stepKinds lists the keys of the step kinds, for errors.
var stepKinds = func() string {
	keys := make([]string, len(stepTable))
	for i, k := range stepTable {
		keys[i] = k.key
	}
	return strings.Join(keys, ", ")
}()

func stepPath(i int, kind string) string { return fmt.Sprintf("steps.%d.%s", i, kind) }
