package instr

import "strings"

// Roles of a fixture's instruments: the keys of a fixture's instruments
// block, of an instrument profile's role and of a bench's instruments. They
// are defined here only.
const (
	RoleSupply      = "supply"
	RoleIntegrator  = "integrator"
	RoleFieldMeter  = "field_meter"
	RoleThermometer = "thermometer"
)

// RoleLabel is how messages, events and a failed run's reason name a role:
// its key with spaces ("field meter"). Stored runs carry it (a violation's
// limit "comm.field meter"), so it does not change.
func RoleLabel(role string) string { return strings.ReplaceAll(role, "_", " ") }

// Set is the instruments of one fixture, one per role. Supply is required
// for a run; Integrator, FieldMeter and Thermometer may be nil (their
// channels are then NaN).
type Set struct {
	Supply      Supply
	Integrator  Integrator
	FieldMeter  FieldMeter
	Thermometer Thermometer
}

// Member is one instrument of a Set with its role; Dev is nil when the set
// has none in that role.
type Member struct {
	Role string
	Dev  any
}

// Members returns the set's instruments in role order: supply, integrator,
// field meter, thermometer.
func (s Set) Members() []Member {
	return []Member{{RoleSupply, s.Supply}, {RoleIntegrator, s.Integrator}, {RoleFieldMeter, s.FieldMeter}, {RoleThermometer, s.Thermometer}}
}
