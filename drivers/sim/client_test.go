package sim

import (
	"bytes"
	"context"
	"errors"
	"hystd/drivers/clock"
	"strings"
	"testing"
	"time"

	"go.bug.st/serial"
)

// lineClient is a minimal line-based client over go.bug.st/serial, written
// for these tests (the real drivers live in drivers/link and drivers/scpi).
type lineClient struct {
	t    testing.TB
	port serial.Port
	buf  []byte
}

var errNoReply = errors.New("no reply within the timeout")

func dial(t testing.TB, path string) *lineClient {
	t.Helper()
	p, err := serial.Open(path, &serial.Mode{BaudRate: 115200})
	if err != nil {
		t.Fatalf("open %s: %v", path, err)
	}
	if err := p.SetReadTimeout(10 * time.Millisecond); err != nil {
		t.Fatal(err)
	}
	c := &lineClient{t: t, port: p}
	t.Cleanup(func() { p.Close() })
	return c
}

func (c *lineClient) send(cmd string) error {
	_, err := c.port.Write([]byte(cmd + "\n"))
	return err
}

// readLine waits up to timeout (wall clock: this is real serial I/O) for a
// line ending in "\n" and returns it without the terminator.
func (c *lineClient) readLine(timeout time.Duration) (string, error) {
	deadline := time.Now().Add(timeout)
	tmp := make([]byte, 256)
	for {
		if i := bytes.IndexByte(c.buf, '\n'); i >= 0 {
			line := string(c.buf[:i])
			c.buf = c.buf[i+1:]
			return line, nil
		}
		if time.Now().After(deadline) {
			return "", errNoReply
		}
		n, err := c.port.Read(tmp)
		if err != nil {
			return "", err
		}
		c.buf = append(c.buf, tmp[:n]...)
	}
}

func (c *lineClient) query(cmd string) string {
	c.t.Helper()
	if err := c.send(cmd); err != nil {
		c.t.Fatalf("%s: %v", cmd, err)
	}
	r, err := c.readLine(2 * time.Second)
	if err != nil {
		c.t.Fatalf("%s: %v", cmd, err)
	}
	return r
}

// write sends a command without reply and waits until the bench has run it
// (by asking *OPC? behind it), so a clock advance that follows sees it.
func (c *lineClient) write(cmd string) {
	c.t.Helper()
	if r := c.query(cmd + ";*OPC?"); r != "1" {
		c.t.Fatalf("%s;*OPC? = %q", cmd, r)
	}
}

// startBench starts cfg on a manual clock and stops it at the end of the test.
func startBench(t *testing.T, cfg Config) (*Bench, *clock.Manual) {
	t.Helper()
	clk := clock.NewManual(time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC))
	b, err := Start(context.Background(), cfg, WithClock(clk))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		if err := b.Close(); err != nil {
			t.Errorf("close: %v", err)
		}
	})
	return b, clk
}

func demoBench(t *testing.T) Config {
	t.Helper()
	c, err := DefaultBench()
	if err != nil {
		t.Fatal(err)
	}
	return c
}

// quiet returns the demo bench without noise and instrument errors, so
// replies can be compared with the truth exactly.
func quiet(t *testing.T) Config {
	c := demoBench(t)
	c.Integrator.NoiseWb, c.Integrator.OffsetV, c.Integrator.GainError = 0, 0, 0
	c.FieldMeter.NoiseT, c.FieldMeter.OffsetT, c.FieldMeter.SensitivityError = 0, 0, 0
	c.Thermometer.NoiseC = 0
	return c
}

func fields(s string) []string { return strings.Split(s, ",") }
