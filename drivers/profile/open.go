package profile

import (
	"context"
	"errors"
	"fmt"
	"math"
	"strings"

	"hystd/drivers/instr"
	"hystd/drivers/link"
)

// Spec says where an instrument is and which profile speaks to it: the
// fields of a fixture's instrument entry (acq/config.Instrument), as a plain
// struct so that drivers do not import acq.
type Spec struct {
	Port     string    // device path; or
	USB      *link.USB // USB identity
	Profile  string    // profile name or path (see Load)
	Baud     int       // overrides the profile's baud rate when non-zero
	Identity string    // overrides the profile's identity when non-empty
}

// Dial opens the serial port of the address with the profile's line
// settings (baud overridden when baud > 0) and backoff for reconnects.
func Dial(ctx context.Context, p Profile, a link.Address, baud int, o Options) (*link.Conn, error) {
	s := p.LineSettings()
	if baud > 0 {
		s.Baud = baud
	}
	return link.Open(ctx, a, s, link.Options{Log: o.Log})
}

// Open loads the spec's profile, opens its port, identifies the instrument
// and sends its init sequence. It returns the role's implementation:
// *Supply, *Integrator, *FieldMeter or *Thermometer (assert to the instr
// interface of the role, or use the typed helpers below). The caller closes
// it. On error nothing stays open.
func Open(ctx context.Context, s Spec, o Options) (instr.Resource, error) {
	p, err := Load(s.Profile)
	if err != nil {
		return nil, err
	}
	return OpenProfile(ctx, p, s, o)
}

// OpenProfile is Open with the profile already loaded (s.Profile is not
// read again): for callers that also need the profile, e.g. its accuracies.
func OpenProfile(ctx context.Context, p Profile, s Spec, o Options) (instr.Resource, error) {
	addr := link.Address{Path: s.Port, USB: s.USB}
	if err := addr.Check(); err != nil {
		return nil, fmt.Errorf("instrument with profile %s: %w", p.Name, err)
	}
	if s.Identity != "" {
		o.Identity = s.Identity
	}
	conn, err := Dial(ctx, p, addr, s.Baud, o)
	if err != nil {
		return nil, fmt.Errorf("instrument with profile %s: %w", p.Name, err)
	}
	var r instr.Resource
	d, err := attach(ctx, p.Role, p, conn, o)
	switch {
	case err == nil:
		switch p.Role {
		case instr.RoleSupply:
			r = &Supply{Device: d}
		case instr.RoleIntegrator:
			r = &Integrator{d}
		case instr.RoleFieldMeter:
			r = &FieldMeter{d}
		case instr.RoleThermometer:
			r = &Thermometer{d}
		}
	case d != nil && p.Role == instr.RoleSupply && errors.Is(err, ErrIdentity):
		err = haltUnidentified(ctx, &Supply{Device: d}, err)
	}
	if err != nil && d != nil && len(d.pending) > 0 {
		// Entries the failed open read are off the instrument's queue:
		// they go with the error, for the caller to carry or name.
		err = &QueueError{Err: err, Entries: d.pending}
	}
	if err != nil {
		conn.Close()
		return nil, err
	}
	return r, nil
}

func openAs[T instr.Resource](ctx context.Context, role string, s Spec, o Options) (T, error) {
	var zero T
	p, err := Load(s.Profile)
	if err != nil {
		return zero, err
	}
	if p.Role != role {
		return zero, fmt.Errorf("profile %s is a %s profile, not a %s", p.Name, p.Role, role)
	}
	r, err := OpenProfile(ctx, p, s, o)
	if err != nil {
		return zero, err
	}
	t, ok := r.(T)
	if !ok {
		r.Close()
		return zero, fmt.Errorf("profile %s is not a %s profile", s.Profile, role)
	}
	return t, nil
}

// OpenSupply opens a supply from a spec (see Open).
func OpenSupply(ctx context.Context, s Spec, o Options) (instr.Supply, error) {
	return openAs[instr.Supply](ctx, instr.RoleSupply, s, o)
}

// OpenIntegrator opens an integrator from a spec (see Open).
func OpenIntegrator(ctx context.Context, s Spec, o Options) (instr.Integrator, error) {
	return openAs[instr.Integrator](ctx, instr.RoleIntegrator, s, o)
}

// OpenFieldMeter opens a field meter from a spec (see Open).
func OpenFieldMeter(ctx context.Context, s Spec, o Options) (instr.FieldMeter, error) {
	return openAs[instr.FieldMeter](ctx, instr.RoleFieldMeter, s, o)
}

// QueueError is an open that failed after it had read entries from the
// instrument's error queue (and so removed them from it): unless the
// caller carries them into its next attempt (Options.Carried) or names
// them, they are lost. Its text names them. It unwraps to Err.
type QueueError struct {
	Err     error
	Entries []instr.InstrumentError
}

func (e *QueueError) Error() string {
	return fmt.Sprintf("%v (read from the error queue before the failure: %s)", e.Err, EntriesText(e.Entries))
}

func (e *QueueError) Unwrap() error { return e.Err }

// QueueEntries returns the error-queue entries a failed open read
// (*QueueError), or nil.
func QueueEntries(err error) []instr.InstrumentError {
	var qe *QueueError
	if errors.As(err, &qe) {
		return qe.Entries
	}
	return nil
}

// EntriesText lists error-queue entries as `-301 "message"; …`.
func EntriesText(es []instr.InstrumentError) string {
	var b strings.Builder
	for i, e := range es {
		if i > 0 {
			b.WriteString("; ")
		}
		fmt.Fprintf(&b, "%d %q", e.Code, e.Msg)
	}
	return b.String()
}

// haltUnidentified brings a supply that answers but fails identification to
// zero all the same: whatever answers on the supply's port may be driving
// the winding. It ramps down and sends the profile's safe state (Halt),
// reads the current and status back, and returns the identification error
// with what was done, loudly logged.
func haltUnidentified(ctx context.Context, s *Supply, idErr error) error {
	s.o.Log.Error("SUPPLY FAILED IDENTIFICATION: commanding it to zero through its profile's safe state all the same", "profile", s.p.Name, "err", idErr)
	herr := s.Halt(ctx)
	rb := readBack(ctx, s)
	if herr != nil {
		return &OpError{Profile: s.p.Name, Op: "identify", Command: "*IDN?",
			Err: fmt.Errorf("%w; commanded to zero through the profile's safe state, which failed: %v (%s)", idErr, herr, rb)}
	}
	s.o.Log.Error("unidentified supply commanded to zero", "profile", s.p.Name, "read_back", rb)
	return &OpError{Profile: s.p.Name, Op: "identify", Command: "*IDN?",
		Err: fmt.Errorf("%w; commanded to zero through the profile's safe state all the same (%s)", idErr, rb)}
}

// readBack describes the supply's current and output as read back.
func readBack(ctx context.Context, s *Supply) string {
	i, ierr := s.ReadCurrent(ctx)
	st, serr := s.Status(ctx)
	switch {
	case ierr != nil && serr != nil:
		return fmt.Sprintf("read-back failed: %v; %v", ierr, serr)
	case ierr != nil:
		return fmt.Sprintf("output on = %v, current unreadable: %v", st.OutputOn, ierr)
	case serr != nil:
		return fmt.Sprintf("read back %.4g A, status unreadable: %v", i.Value, serr)
	}
	if math.Abs(i.Value) <= s.haltZero() && !st.OutputOn {
		return fmt.Sprintf("supply at zero, output off: read back %.4g A", i.Value)
	}
	return fmt.Sprintf("NOT SAFE: read back %.4g A, output on = %v", i.Value, st.OutputOn)
}
