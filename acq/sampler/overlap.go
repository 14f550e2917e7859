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

// flight is a line in the overlapped round. Its reads go out in groups:
// a group is up to line.queued reads from step k on, their queries written
// back to back (one at a time without instr.Queued), their replies
// collected in order; asked[i] is when step k+i was asked (machine clock)
// and c how many replies of the group are in. The group's values are put
// only once all its replies are in: a late, lost, garbled or out-of-step
// reply anywhere in the group (a lost reply shifts the later ones up, so
// the last query of the group then times out) drops them all, and the
// whole group is asked again after the driver's resync.
type flight struct {
	l     *line
	k     int
	asked []time.Time
	c     int
	held  []heldReply
	done  bool
	o     outcome
}

// heldReply is a reply of the group in flight, kept until the group is
// complete.
type heldReply struct {
	got stamped
	ok  bool
	put func(*Reading)
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

// due is when the flight's next reply is expected: its last round trip
// after its query.
func (f *flight) due() time.Time { return f.asked[f.c].Add(f.l.rtt[f.k+f.c]) }

// begin sends the queries of the group from step k, or of the next
// groups, repeating as Retry does (a resync that timed out, …); the
// flight is done after the last step or a failure.
func (f *flight) begin(ctx context.Context) {
	for f.k < len(f.l.steps) {
		at, err := f.ask(ctx)
		if err == nil {
			return
		}
		if !again(ctx, err) {
			f.fail(at, err)
			return
		}
	}
	f.done = true
}

// ask writes the queries of the group from step k back to back (the
// first abandons whatever the line still had asked) and returns the step
// that failed, if one did.
func (f *flight) ask(ctx context.Context) (int, error) {
	n := min(f.l.queued, len(f.l.steps)-f.k)
	f.asked, f.c, f.held = f.asked[:0], 0, f.held[:0]
	for i := range n {
		f.asked = append(f.asked, time.Now())
		var err error
		if i == 0 {
			err = f.l.ov.Begin(ctx, f.l.steps[f.k].r)
		} else {
			err = f.l.q.BeginBehind(ctx, f.l.steps[f.k+i].r)
		}
		if err != nil {
			return f.k + i, err
		}
	}
	return f.k, nil
}

// collect takes the group's next reply (Ready said it is in); once the
// group is complete it puts its values and begins the next group, and
// after a late or out-of-step reply it asks the group again.
func (f *flight) collect(ctx context.Context, out *Reading) {
	at := f.k + f.c
	got, ok, put, err := f.l.steps[at].take(ctx)
	f.l.rtt[at] = time.Since(f.asked[f.c])
	switch {
	case err == nil:
		f.held = append(f.held, heldReply{got, ok, put})
		if f.c++; f.c < len(f.asked) {
			return // the group's next reply
		}
		for _, h := range f.held {
			h.put(out)
			if h.ok {
				f.o.got = append(f.o.got, h.got)
			}
		}
		f.k += len(f.asked)
	case !again(ctx, err):
		f.fail(at, err)
		return
	}
	f.begin(ctx)
}

func (f *flight) fail(at int, err error) {
	f.o.err = &RoleError{Role: f.l.role, Err: fmt.Errorf("%s: %w", f.l.steps[at].what, err)}
	f.done = true
}
