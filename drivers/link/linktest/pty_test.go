package linktest

import (
	"bufio"
	"os"
	"testing"
	"time"
)

// The emulated line's timeline against the arithmetic of an RS-232 line
// (common practice: 10 bits a character, 8N1, each direction its own
// wire): at 115 200 Bd a character takes 86.805… µs.
func TestTimeline(t *testing.T) {
	ch := LineTime(1, 115200)
	if ch != 86805*time.Nanosecond {
		t.Fatalf("one character %v, want 86.805 µs", ch)
	}
	t0 := time.Unix(0, 0)
	// In turn: the next command is written after the reply is in, so an
	// exchange takes command + delay + reply, as on a half-duplex wait.
	l := Timeline{Baud: 115200, Delay: time.Millisecond}
	in := l.Command(t0, 11)
	out := l.Reply(in, 14)
	if want := t0.Add(LineTime(25, 115200) + time.Millisecond); !out.Equal(want) {
		t.Fatalf("in turn: reply out at %v, want %v", out.Sub(t0), want.Sub(t0))
	}
	// Two commands written together: the second follows the first on the
	// receive line; the first reply starts once its command is in (plus
	// the delay), the second when both its command is in and the first
	// reply has left.
	l = Timeline{Baud: 115200}
	in1 := l.Command(t0, 11)
	in2 := l.Command(t0, 11)
	out1 := l.Reply(in1, 14)
	out2 := l.Reply(in2, 14)
	c11, c14 := LineTime(11, 115200), LineTime(14, 115200)
	if in2.Sub(t0) != 2*c11 || out1.Sub(t0) != c11+c14 || out2.Sub(t0) != c11+2*c14 {
		t.Fatalf("queued: in %v %v, out %v %v; want 22, 25, 39 characters of %v", in1.Sub(t0), in2.Sub(t0), out1.Sub(t0), out2.Sub(t0), ch)
	}
	// A long second command holds its reply back past the first reply.
	l = Timeline{Baud: 115200}
	in1 = l.Command(t0, 11)
	in2 = l.Command(t0, 30)
	l.Reply(in1, 14)
	if out2 = l.Reply(in2, 14); out2.Sub(t0) != c11+LineTime(30, 115200)+c14 {
		t.Fatalf("long second command: second reply out at %v, want 55 characters", out2.Sub(t0))
	}
}

// Commands written back to back are answered in order on the pty, each
// reply once its own command is in.
func TestServeLineQueued(t *testing.T) {
	p, err := Open()
	if err != nil {
		t.Skipf("no ptys: %v", err)
	}
	defer p.Close()
	r := ServeLine(p, "\n", "\n", 0, 115200, func(cmd string) (string, bool) { return "re " + cmd, true })
	defer r.Stop()
	c, err := os.OpenFile(p.Path, os.O_RDWR, 0)
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	if _, err := c.Write([]byte("A?\nB?\nC?\n")); err != nil {
		t.Fatal(err)
	}
	br := bufio.NewReader(c)
	for _, want := range []string{"re A?\n", "re B?\n", "re C?\n"} {
		got, err := br.ReadString('\n')
		if err != nil || got != want {
			t.Fatalf("got %q, %v; want %q", got, err, want)
		}
	}
}
