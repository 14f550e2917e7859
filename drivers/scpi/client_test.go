package scpi

import (
	"bytes"
	"context"
	"errors"
	"log/slog"
	"strings"
	"testing"
	"time"

	"hystd/drivers/link"
	"hystd/drivers/scpi/scpitest"
)

type ex = scpitest.Exchange

func client(t *testing.T, steps ...ex) *Client {
	s := scpitest.New(t, "\n", "\n", steps...)
	return New(s, Options{Name: "t", ErrorQuery: "SYST:ERR?"})
}

func TestQueryAndCommon(t *testing.T) {
	ctx := context.Background()
	c := client(t,
		ex{Send: "*IDN?", Reply: "HYSTD-TEST,UNIT,0001,1.0"},
		ex{Send: "*RST"},
		ex{Send: "SYST:ERR?", Reply: `0,"No error"`},
		ex{Send: "*CLS"},
		ex{Send: "*OPC?", Reply: "1"},
		ex{Send: "*ESR?", Reply: "+32"},
		ex{Send: "*STB?", Reply: "4"},
		ex{Send: "MEAS:CURR?", Reply: "-1.250000E+00"},
	)
	if id, err := c.Identify(ctx); err != nil || id != "HYSTD-TEST,UNIT,0001,1.0" {
		t.Fatalf("Identify = %q, %v", id, err)
	}
	if err := c.Reset(ctx); err != nil {
		t.Fatal(err)
	}
	if err := c.Clear(ctx); err != nil {
		t.Fatal(err)
	}
	if err := c.WaitComplete(ctx); err != nil {
		t.Fatal(err)
	}
	if v, err := c.EventStatus(ctx); err != nil || v != 32 {
		t.Fatalf("ESR = %d, %v", v, err)
	}
	if v, err := c.StatusByte(ctx); err != nil || v != 4 {
		t.Fatalf("STB = %d, %v", v, err)
	}
	if v, err := c.QueryNumber(ctx, "MEAS:CURR?"); err != nil || v != -1.25 {
		t.Fatalf("QueryNumber = %v, %v", v, err)
	}
}

func TestSetDrainsErrorQueue(t *testing.T) {
	ctx := context.Background()
	c := client(t,
		ex{Send: "SOUR:CURR 25"},
		ex{Send: "SYST:ERR?", Reply: `-222,"Data out of range"`},
		ex{Send: "SYST:ERR?", Reply: `-221,"Settings conflict"`},
		ex{Send: "SYST:ERR?", Reply: `0,"No error"`},
		ex{Send: "SOUR:CURR 1"},
		ex{Send: "SYST:ERR?", Reply: `+0,"No error"`},
	)
	err := c.Set(ctx, "SOUR:CURR 25")
	var ie *InstrumentError
	if !errors.As(err, &ie) {
		t.Fatalf("got %v, want *InstrumentError", err)
	}
	if ie.Code != -222 || ie.Msg != "Data out of range" || ie.Command != "SOUR:CURR 25" ||
		len(ie.More) != 1 || ie.More[0].Code != -221 {
		t.Fatalf("got %+v", ie)
	}
	if !strings.Contains(err.Error(), `-222 "Data out of range"`) {
		t.Fatalf("message %q does not show code and text", err)
	}
	if err := c.Set(ctx, "SOUR:CURR 1"); err != nil {
		t.Fatalf("clean set: %v", err)
	}
}

func TestErrorQueueNeverEmpties(t *testing.T) {
	steps := []ex{{Send: "X"}}
	for range 3 {
		steps = append(steps, ex{Send: "SYST:ERR?", Reply: `-350,"Queue overflow"`})
	}
	s := scpitest.New(t, "\n", "\n", steps...)
	c := New(s, Options{ErrorQuery: "SYST:ERR?", MaxErrors: 3})
	var ie *InstrumentError
	if err := c.Set(context.Background(), "X"); !errors.As(err, &ie) || len(ie.More) != 3 {
		t.Fatalf("got %v", err)
	}
}

func TestGarbledErrorQueueReply(t *testing.T) {
	c := client(t, ex{Send: "OUTP ON"}, ex{Send: "SYST:ERR?", Reply: "\x00\x7f?"})
	err := c.Set(context.Background(), "OUTP ON")
	var pe *ParseError
	if !errors.As(err, &pe) || !strings.Contains(err.Error(), "OUTP ON") {
		t.Fatalf("got %v, want a *ParseError naming the setting", err)
	}
}

func TestTimeoutThenLateReplyIsDiscarded(t *testing.T) {
	ctx := context.Background()
	c := client(t,
		ex{Send: "MEAS:CURR?", Err: scpitest.Timeout, Reply: "1.0"}, // the reply comes too late
		ex{Send: "MEAS:CURR?", Reply: "2.0"},
	)
	_, err := c.Query(ctx, "MEAS:CURR?")
	if !errors.Is(err, link.ErrTimeout) {
		t.Fatalf("got %v, want link.ErrTimeout", err)
	}
	v, err := c.QueryNumber(ctx, "MEAS:CURR?")
	if err != nil || v != 2.0 {
		t.Fatalf("after a timeout got %v, %v; the late reply must not answer the next query", v, err)
	}
}

func TestGarbledNumber(t *testing.T) {
	c := client(t, ex{Send: "MEAS:VOLT?", Raw: []byte("1.2\x003V\n")})
	_, err := c.QueryNumber(context.Background(), "MEAS:VOLT?")
	var pe *ParseError
	if !errors.As(err, &pe) || pe.Reply != "1.2\x003V" || !strings.Contains(err.Error(), "MEAS:VOLT?") {
		t.Fatalf("got %v", err)
	}
}

func TestReplyTooLong(t *testing.T) {
	s := scpitest.New(t, "\n", "\n", ex{Send: "Q?", Raw: bytes.Repeat([]byte("A"), 2000)})
	c := New(s, Options{MaxReply: 1000})
	if _, err := c.Query(context.Background(), "Q?"); err == nil || !strings.Contains(err.Error(), "longer than 1000") {
		t.Fatalf("got %v", err)
	}
}

func TestHangupIsDisconnect(t *testing.T) {
	c := client(t, ex{Send: "MEAS:CURR?", Err: scpitest.Hangup})
	if _, err := c.Query(context.Background(), "MEAS:CURR?"); !errors.Is(err, link.ErrDisconnected) {
		t.Fatalf("got %v", err)
	}
}

func TestTerminatorsAndSplitReads(t *testing.T) {
	// "\r\n" commands, "\r" replies; the reply arrives in pieces.
	s := scpitest.New(t, "\r\n", "\r", ex{Send: "READ:FLUX?", Raw: []byte("+1.0")}, ex{Send: "X?", Reply: "7"})
	c := New(s, Options{WriteTerm: "\r\n", ReadTerm: "\r"})
	ctx := context.Background()
	// The first reply has no terminator yet: the read times out.
	if _, err := c.Query(ctx, "READ:FLUX?"); !errors.Is(err, link.ErrTimeout) {
		t.Fatalf("got %v, want a timeout for a reply without terminator", err)
	}
	if v, err := c.Query(ctx, "X?"); err != nil || v != "7" {
		t.Fatalf("got %q, %v", v, err)
	}
}

func TestQueryBlock(t *testing.T) {
	ctx := context.Background()
	payload := []byte{0, 1, '\n', 2, '#'}
	c := client(t,
		ex{Send: "TRAC:DATA?", Raw: append([]byte("#15"), append(payload, '\n')...)},
		ex{Send: "TRAC:DATA?", Raw: []byte("#0abc\n")},
		ex{Send: "*OPC?", Reply: "1"},
		ex{Send: "TRAC:DATA?", Raw: []byte("#9abc\n")},
	)
	got, err := c.QueryBlock(ctx, "TRAC:DATA?")
	if err != nil || !bytes.Equal(got, payload) {
		t.Fatalf("definite block = %q, %v", got, err)
	}
	got, err = c.QueryBlock(ctx, "TRAC:DATA?")
	if err != nil || string(got) != "abc" {
		t.Fatalf("indefinite block = %q, %v", got, err)
	}
	// The terminator after the definite block was consumed: the next reply is clean.
	if err := c.WaitComplete(ctx); err != nil {
		t.Fatal(err)
	}
	if _, err := c.QueryBlock(ctx, "TRAC:DATA?"); err == nil {
		t.Fatal("a garbled block header was accepted")
	}
}

func TestCancelledContext(t *testing.T) {
	c := client(t)
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if _, err := c.Query(ctx, "MEAS:CURR?"); !errors.Is(err, context.Canceled) {
		t.Fatalf("got %v", err)
	}
}

// TestDebugLogAndStamps checks the exchange log and the reply stamps with
// an injected clock.
func TestDebugLogAndStamps(t *testing.T) {
	var logged bytes.Buffer
	base := time.Unix(1000, 0)
	ticks := 0
	now := func() time.Time { ticks++; return base.Add(time.Duration(ticks) * 4 * time.Millisecond) }
	s := scpitest.New(t, "\n", "\n", ex{Send: "MEAS:FIEL?", Reply: "0.5"})
	c := New(s, Options{Name: "probe", Now: now,
		Log: slog.New(slog.NewTextHandler(&logged, &slog.HandlerOptions{Level: slog.LevelDebug}))})
	r, err := c.QueryTimed(context.Background(), "MEAS:FIEL?")
	if err != nil {
		t.Fatal(err)
	}
	mid, unc := r.Mid()
	if !mid.Equal(base.Add(6*time.Millisecond)) || unc != 2*time.Millisecond {
		t.Fatalf("mid %v unc %v", mid.Sub(base), unc)
	}
	for _, want := range []string{"instr=probe", "cmd=MEAS:FIEL?", "reply=0.5", "rtt=4ms"} {
		if !strings.Contains(logged.String(), want) {
			t.Fatalf("log %q lacks %q", logged.String(), want)
		}
	}
}

// trickle delivers one byte per Read and never the terminator; each Read
// honours ctx. The stream's own timeout never fires, the reply timeout must.
type trickle struct{ wrote bool }

func (s *trickle) Write(ctx context.Context, p []byte) (int, error) {
	s.wrote = true
	return len(p), nil
}
func (s *trickle) Read(ctx context.Context, p []byte) (int, error) {
	if err := ctx.Err(); err != nil {
		return 0, err
	}
	p[0] = '1'
	return 1, nil
}

func TestReplyTimeoutBoundsTrickle(t *testing.T) {
	c := New(&trickle{}, Options{Timeout: 20 * time.Millisecond, MaxReply: 1 << 30})
	_, err := c.Query(context.Background(), "MEAS:CURR?")
	if !errors.Is(err, link.ErrTimeout) {
		t.Fatalf("got %v, want link.ErrTimeout", err)
	}
	// The caller's own cancellation stays a cancellation.
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if _, err := c.Query(ctx, "MEAS:CURR?"); errors.Is(err, link.ErrTimeout) || !errors.Is(err, context.Canceled) {
		t.Fatalf("got %v, want context.Canceled", err)
	}
}

// babbler has a byte ready on every Read, whatever the deadline: an
// instrument that never stops sending, independent of the machine's speed.
type babbler struct{}

func (babbler) Write(ctx context.Context, p []byte) (int, error) { return len(p), nil }
func (babbler) Read(ctx context.Context, p []byte) (int, error) {
	p[0] = '1'
	return 1, nil
}

// TestBabblingInstrumentAfterTimeout: a reply that never ends is cut at
// MaxReply, and the next query refuses to guess which bytes answer it. The
// stream has a byte ready on every Read, so nothing depends on how many
// reads the machine manages within a time window.
func TestBabblingInstrumentAfterTimeout(t *testing.T) {
	c := New(babbler{}, Options{Timeout: time.Minute, MaxReply: 4096})
	if _, err := c.Query(context.Background(), "A?"); err == nil {
		t.Fatal("a reply without terminator was accepted")
	}
	if _, err := c.Query(context.Background(), "A?"); err == nil || !strings.Contains(err.Error(), "keeps sending") {
		t.Fatalf("got %v", err)
	}
}

// A definite block whose terminator never comes: the data is returned and
// the next query is not confused; a terminator arriving in a later read
// chunk is consumed with the block.
func TestBlockTerminator(t *testing.T) {
	ctx := context.Background()
	c := client(t,
		ex{Send: "TRAC:DATA?", Raw: []byte("#15hello")},
		ex{Send: "*OPC?", Reply: "1"},
	)
	got, err := c.QueryBlock(ctx, "TRAC:DATA?")
	if err != nil || string(got) != "hello" {
		t.Fatalf("block %q, %v", got, err)
	}
	if err := c.WaitComplete(ctx); err != nil {
		t.Fatalf("next query after a block without terminator: %v", err)
	}
}

// chunked delivers a fixed byte sequence two bytes per Read.
type chunked struct{ data []byte }

func (s *chunked) Write(ctx context.Context, p []byte) (int, error) { return len(p), nil }
func (s *chunked) Read(ctx context.Context, p []byte) (int, error) {
	if len(s.data) == 0 {
		return 0, scpitest.Timeout
	}
	n := copy(p[:min(2, len(p))], s.data)
	s.data = s.data[n:]
	return n, nil
}

func TestBlockTerminatorInLaterChunk(t *testing.T) {
	s := &chunked{data: []byte("#13abc\r\n7\r\n")}
	c := New(s, Options{ReadTerm: "\r\n"})
	got, err := c.QueryBlock(context.Background(), "Q?")
	if err != nil || string(got) != "abc" {
		t.Fatalf("block %q, %v", got, err)
	}
	if v, err := c.Query(context.Background(), "X?"); err != nil || v != "7" {
		t.Fatalf("next reply %q, %v", v, err)
	}
}

// deadlines delivers a fixed byte sequence two bytes per Read and records
// the deadline of each Read's context.
type deadlines struct {
	data []byte
	seen []time.Time
}

func (s *deadlines) Write(ctx context.Context, p []byte) (int, error) { return len(p), nil }
func (s *deadlines) Read(ctx context.Context, p []byte) (int, error) {
	d, _ := ctx.Deadline()
	s.seen = append(s.seen, d)
	if len(s.data) == 0 {
		return 0, scpitest.Timeout
	}
	n := copy(p[:min(2, len(p))], s.data)
	s.data = s.data[n:]
	return n, nil
}

// The reply timeout of a block bounds the silence, not the transfer: every
// chunk that arrives starts it again (a block of 100 k values takes seconds
// at 115200 Bd). Checked on the deadlines the stream is read with, not on
// the wall clock: each Read's deadline is at least the one before, and the
// last is later than the first.
func TestBlockTimeoutRestartsWithEachChunk(t *testing.T) {
	s := &deadlines{data: []byte("#210abcdefghij\r\n")}
	c := New(s, Options{ReadTerm: "\r\n", Timeout: time.Hour})
	got, err := c.QueryBlock(context.Background(), "Q?")
	if err != nil || string(got) != "abcdefghij" {
		t.Fatalf("block %q, %v", got, err)
	}
	if len(s.seen) < 5 {
		t.Fatalf("%d reads", len(s.seen))
	}
	for i := 1; i < len(s.seen); i++ {
		if s.seen[i].Before(s.seen[i-1]) {
			t.Fatalf("read %d: deadline %v before the previous %v", i, s.seen[i], s.seen[i-1])
		}
	}
	if !s.seen[len(s.seen)-1].After(s.seen[0]) {
		t.Fatal("the reply deadline never moved while the block came in")
	}
}
