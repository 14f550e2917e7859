package recipe

import (
	"reflect"
	"strings"
	"testing"
)

// TestStepTable checks that stepTable and StepSpec declare the same kinds,
// in the same order, so that a kind added to one and not the other fails
// here rather than decoding a step nothing checks or expands.
func TestStepTable(t *testing.T) {
	st := reflect.TypeOf(StepSpec{})
	if st.NumField() != len(stepTable) {
		t.Fatalf("StepSpec has %d kinds, stepTable %d", st.NumField(), len(stepTable))
	}
	for i, k := range stepTable {
		f := st.Field(i)
		if key, _, _ := strings.Cut(f.Tag.Get("yaml"), ","); key != k.key {
			t.Errorf("entry %d: stepTable says %q, StepSpec.%s is %q", i, k.key, f.Name, key)
		}
		var s StepSpec
		v := reflect.ValueOf(&s).Elem().Field(i)
		v.Set(reflect.New(f.Type.Elem()))
		key, b, n := s.kind()
		if n != 1 || key != k.key || b == nil {
			t.Errorf("StepSpec with only %s set: kind() = %q, %v, %d", f.Name, key, b, n)
		}
	}
	var empty StepSpec
	if key, b, n := empty.kind(); n != 0 || key != "" || b != nil {
		t.Errorf("empty StepSpec: kind() = %q, %v, %d", key, b, n)
	}
}
