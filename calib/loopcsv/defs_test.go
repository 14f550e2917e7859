package loopcsv

import (
	"reflect"
	"strings"
	"testing"

	"hystd/calib/loop"
)

// TestSummaryKeysFromDefs: the keys of `hystd analyze --json` (fixed by
// PRODUCT.md, so spelled as struct tags) are exactly the JSON keys of
// calib/loop.Defs, each with its _u twin, plus the centring keys.
func TestSummaryKeysFromDefs(t *testing.T) {
	tags := map[string]bool{}
	st := reflect.TypeOf(Summary{})
	for i := range st.NumField() {
		tags[strings.Split(st.Field(i).Tag.Get("json"), ",")[0]] = true
	}
	want := map[string]bool{"centred": true, "b_offset_t": true}
	for _, d := range loop.Defs {
		if d.JSON != "" {
			want[d.JSON], want[d.JSON+"_u"] = true, true
		}
	}
	if !reflect.DeepEqual(tags, want) {
		t.Errorf("Summary keys %v, Defs give %v", tags, want)
	}
}
