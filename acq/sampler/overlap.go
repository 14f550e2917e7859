package sampler

import (
	"context"
	"fmt"
	"time"
)

// The overlapped round's waits. When nothing is in, the round waits on the
// reply due first until the next is due. Once every open reply is overdue
// it waits an eighth of how overdue the first is, between minWait (a
// shorter wait costs more system calls than it saves) and maxWait: a reply
// that arrives on another line meanwhile sits unread (its interval widens,
// and that line's next query waits) for at most about an eighth of the
// lateness it is met with, and an instrument that times out is looked at
// every maxWait.
const (
	minWait = 50 * time.Microsecond
	maxWait = 2 * time.Millisecond
)

// flight is a line in the overlapped round: its step k is begun (asked at
// asked, machine clock) unless done.
type flight struct {
	l     *line
	k     int
	asked time.Time
	done  bool
	o     outcome
}

// overlap reads the overlapped lines (see the package comment) and puts
// each line's outcome in res.
func overlap(ctx context.Context, lines []*line, out *Reading, res map[*line]outcome) {
	var fs []*flight
	for _, l := range lines {
		if l.ov != nil {
			f := &flight{l: l, o: outcome{l: l}}
			f.begin(ctx)
			fs = append(fs, f)
		}
	}
	for {
		var first *flight // the open flight whose reply is due first
		open, progressed := 0, false
		for _, f := range fs {
			if f.done {
				continue
			}
			if f.l.ov.Ready(ctx, 0) {
				f.collect(ctx, out)
				progressed = true
			}
			if f.done {
				continue
			}
			open++
			if first == nil || f.due().Before(first.due()) {
				first = f
			}
		}
		if open == 0 {
			break
		}
		if progressed {
			continue
		}
		wait := 20 * time.Millisecond // the one open line: wait on it (the link looks at ctx this often)
		if open > 1 {
			wait = maxWait
			for _, f := range fs {
				if !f.done && f != first {
					wait = min(wait, time.Until(f.due()))
				}
			}
			wait = max(wait, min(time.Since(first.due())/8, maxWait), minWait)
		}
		if first.l.ov.Ready(ctx, wait) {
			first.collect(ctx, out)
		}
	}
	for _, f := range fs {
		res[f.l] = f.o
	}
}

// due is when the flight's reply is expected: its last round trip after
// its query.
func (f *flight) due() time.Time { return f.asked.Add(f.l.rtt[f.k]) }

// begin sends the query of step k, or of the next steps, repeating as
// Retry does (a resync that timed out, …); the flight is done after the
// last step or a failure.
func (f *flight) begin(ctx context.Context) {
	for f.k < len(f.l.steps) {
		f.asked = time.Now()
		err := f.l.ov.Begin(ctx, f.l.steps[f.k].r)
		if err == nil {
			return
		}
		if !again(ctx, err) {
			f.fail(err)
			return
		}
	}
	f.done = true
}

// collect takes step k's reply (Ready said it is in) and begins the next
// step, or step k again after a late or out-of-step reply.
func (f *flight) collect(ctx context.Context, out *Reading) {
	st := f.l.steps[f.k]
	got, ok, err := st.take(ctx, out)
	f.l.rtt[f.k] = time.Since(f.asked)
	switch {
	case err == nil:
		if ok {
			f.o.got = append(f.o.got, got)
		}
		f.k++
	case !again(ctx, err):
		f.fail(err)
		return
	}
	f.begin(ctx)
}

func (f *flight) fail(err error) {
	f.o.err = &RoleError{Role: f.l.role, Err: fmt.Errorf("%s: %w", f.l.steps[f.k].what, err)}
	f.done = true
}
