package profile

import "hystd/drivers/instr"

// Profile is one instrument profile as loaded from YAML.
type Profile struct {
	Kind        string `yaml:"kind"` // always "instrument-profile"
	Name        string `yaml:"name"` // our own name, referenced by fixtures
	Role        string `yaml:"role"` // supply | integrator | field_meter | thermometer
	Description string `yaml:"description"`

	Serial      SerialSettings `yaml:"serial"`
	Terminators Terminators    `yaml:"terminators"`
	Timeout     string         `yaml:"timeout"` // per reply, e.g. "500ms"
	// QueuedQueries is how many queries the instrument accepts before its
	// first reply is read, answering them in order (1 to MaxQueued;
	// absent: 1, a query only once the previous reply is in). Declare more
	// only for an instrument known to keep queued queries and their
	// replies in order: an IEEE 488.2 instrument may discard an unread
	// reply when a new query arrives (a query error), so the bundled
	// profiles of real instruments keep 1. See Profile.Queued.
	QueuedQueries *int `yaml:"queued_queries"`

	// Identity is a substring that the *IDN? reply must contain.
	Identity string `yaml:"identity"`
	// ErrorQuery is the command read after every setting until it reports
	// code 0, e.g. "SYST:ERR?". Empty: the instrument has no error queue.
	ErrorQuery string `yaml:"error_query"`

	// Added by the safety work (absent keys keep the defaults named):
	//
	// SyncQuery is sent to bring a line back in step after a broken
	// exchange (a timeout, a reply that does not parse), once the line has
	// been quiet; lines are discarded until one contains SyncReply. Default
	// "*IDN?" answered with Identity: no reading can be mistaken for it.
	SyncQuery string `yaml:"sync_query"`
	SyncReply string `yaml:"sync_reply"`
	// ErrorPoll is how often a run reads the error queue on its own (errors
	// the instrument raises by itself); default "1s", "off" never.
	ErrorPoll string `yaml:"error_poll"`
	// ErrorSeverity maps an error code ("-310") or an inclusive range of
	// codes ("-399..-300") to "warn" (an event, the run goes on) or "fail"
	// (the run ends failed after the safe ramp-down). A code matched by
	// nothing is "fail". An exact code wins over a range.
	ErrorSeverity map[string]string `yaml:"error_severity"`
	// TripClear (supply) says what clears a latched trip, for the message
	// a run ends with, e.g. "let the winding cool, then send *RST".
	TripClear string `yaml:"trip_clear"`

	Init      []string `yaml:"init"`       // sent after opening and after every reconnect
	SafeState []string `yaml:"safe_state"` // sent by Halt after any ramp-down

	// Operations maps an operation name of the role (see Ops*) to its command.
	Operations map[string]Operation `yaml:"operations"`

	// Supply only: the slew rate Halt ramps down with, in A/s, and the step
	// period of that ramp.
	HaltSlew   float64 `yaml:"halt_slew_a_per_s"`
	HaltPeriod string  `yaml:"halt_period"`

	// Buffered (integrator, field meter; optional): timed acquisition, see buffered.go.
	Buffered *Buffered `yaml:"buffered"`
	// Ramp (supply; optional): a programmed ramp at a set rate, see ramp.go.
	Ramp *Ramp `yaml:"ramp"`
}

// SerialSettings are the line settings of the port.
type SerialSettings struct {
	Baud     int    `yaml:"baud"`
	DataBits int    `yaml:"data_bits"`
	Parity   string `yaml:"parity"`    // none | even | odd
	StopBits string `yaml:"stop_bits"` // "1" | "1.5" | "2"
	Flow     string `yaml:"flow"`      // none | rtscts
	// DTR and RTS, when given, are driven to that level after opening
	// (added by drivers/profile; absent: left alone, as a pty requires).
	DTR *bool `yaml:"dtr"`
	RTS *bool `yaml:"rts"`
}

// Terminators end every command written and every reply read.
type Terminators struct {
	Write string `yaml:"write"` // e.g. "\n", "\r\n", "\r"
	Read  string `yaml:"read"`
}

// Operation is one query or setting of an instrument.
//
// Exactly one of Set and Query is given. In Set, "{}" is replaced by the
// value formatted with Format (a Go fmt verb, default "%g") after dividing
// it by Scale and mapping it through Map when Map is given (booleans are
// "true"/"false" keys). For Query, the reply is parsed with Parse and the
// number multiplied by Scale to give SI.
//
// A numeric Set with Map selects among discrete values: the SI value must
// equal one of Map's keys (numbers) and the mapped text replaces "{}".
// Parse kinds: number (NR1/NR2/NR3; SCPI overflow 9.9E37 is an overrange
// error); number-unit (a number followed by a unit suffix, see Suffixes);
// field:N (the N-th field, from 1, of a Separator-separated reply, parsed
// as a number); bool (Map maps reply → "true"/"false"; without Map 1/0 and
// ON/OFF); int (NR1; with Bits a status register); enum (Map maps reply →
// value).
type Operation struct {
	Set    string            `yaml:"set"`
	Query  string            `yaml:"query"`
	Format string            `yaml:"format"`
	Parse  string            `yaml:"parse"` // number | number-unit | field:N | bool | int | enum
	Unit   string            `yaml:"unit"`  // SI unit after scaling: A, V, Wb, T, °C
	Scale  float64           `yaml:"scale"` // instrument unit → SI (default 1)
	Range  []float64         `yaml:"range"` // [min, max] in SI; setpoints outside are rejected
	Map    map[string]string `yaml:"map"`   // value map for enums and booleans
	// Bits names status-register bits for parse: int (bit number → meaning).
	Bits map[string]int `yaml:"bits"`
	// Settle is waited after a setting; Poll, when given, is queried until it
	// returns PollDone (e.g. "*OPC?" → "1").
	Settle   string `yaml:"settle"`
	Poll     string `yaml:"poll"`
	PollDone string `yaml:"poll_done"`
	// Accuracy of a reading for the uncertainty budget: |U| = Gain·|value| + Offset,
	// as a 95 % (k = 2) interval in the SI unit.
	Accuracy *Accuracy `yaml:"accuracy"`

	// Added by drivers/profile (additive; absent keys keep the meaning above):
	//
	// Suffixes, for parse: number-unit, maps each unit suffix the instrument
	// may append (case-sensitive, e.g. "mT", "G") to the factor that turns
	// the number into the instrument unit; Scale is applied after it. Empty:
	// the only suffix accepted is Unit itself, with factor 1.
	Suffixes map[string]float64 `yaml:"suffixes"`
	// Separator splits the reply for parse: field:N (N counts from 1);
	// default ",".
	Separator string `yaml:"separator"`
	// PollPeriod is waited between Poll queries that did not return
	// PollDone (default "50ms"); PollTimeout bounds the total wait
	// (default "30s").
	PollPeriod  string `yaml:"poll_period"`
	PollTimeout string `yaml:"poll_timeout"`
}

// Accuracy is a gain-and-offset specification of a reading.
type Accuracy struct {
	Gain   float64 `yaml:"gain"`   // fraction of reading
	Offset float64 `yaml:"offset"` // SI unit
}

// Operation names, per role (the reads are named in drivers/instr).
const (
	// supply
	OpSetCurrent  = "set_current"
	OpReadCurrent = string(instr.ReadCurrent)
	OpReadVoltage = string(instr.ReadVoltage)
	OpSetOutput   = "set_output"
	OpReadStatus  = string(instr.ReadStatus) // parse: int with bits compliance, overtemp, trip, output
	// integrator
	OpReset        = "reset"
	OpSetRange     = "set_range"
	OpReadFlux     = string(instr.ReadFlux)
	OpReadOverload = string(instr.ReadOverload)
	// field meter
	OpReadField = string(instr.ReadField)
	OpZero      = "zero"
	// thermometer
	OpReadTemperature = string(instr.ReadTemperature)
)
