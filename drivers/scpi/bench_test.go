package scpi

import (
	"context"
	"testing"
	"time"

	"hystd/drivers/link"
	"hystd/drivers/link/linktest"
)

// BenchmarkQueryPTY: SCPI transactions (query and reply) per second through
// drivers/link and go.bug.st/serial on a real pseudo-terminal.
func BenchmarkQueryPTY(b *testing.B) {
	p, err := linktest.Open()
	if err != nil {
		b.Skipf("no ptys: %v", err)
	}
	r := linktest.Serve(p, "\n", "\n", 0, func(cmd string) (string, bool) { return "+1.234560E+00", true })
	defer func() { r.Stop(); p.Close() }()
	conn, err := link.Open(context.Background(), link.Address{Path: p.Path}, link.Settings{Baud: 115200, ReadTimeout: time.Second}, link.Options{})
	if err != nil {
		b.Fatal(err)
	}
	defer conn.Close()
	c := New(conn, Options{})
	ctx := context.Background()
	for b.Loop() {
		if _, err := c.QueryNumber(ctx, "MEAS:CURR?"); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "transactions/s")
}
