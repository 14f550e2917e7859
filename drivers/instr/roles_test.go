package instr

import "testing"

// TestRoleLabel: messages and stored violation limits name the field meter
// "field meter" (with a space) and the other roles by their key.
func TestRoleLabel(t *testing.T) {
	for role, want := range map[string]string{RoleSupply: "supply", RoleIntegrator: "integrator",
		RoleFieldMeter: "field meter", RoleThermometer: "thermometer"} {
		if got := RoleLabel(role); got != want {
			t.Errorf("RoleLabel(%q) = %q, want %q", role, got, want)
		}
	}
}

// TestMembers: a set lists its instruments in role order, the missing ones
// as nil.
func TestMembers(t *testing.T) {
	m := Set{}.Members()
	want := []string{RoleSupply, RoleIntegrator, RoleFieldMeter, RoleThermometer}
	if len(m) != len(want) {
		t.Fatalf("%d members, want %d", len(m), len(want))
	}
	for i, r := range want {
		if m[i].Role != r || m[i].Dev != nil {
			t.Errorf("member %d = %+v, want role %s with no instrument", i, m[i], r)
		}
	}
}
