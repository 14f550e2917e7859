package profile

import (
	"fmt"
	"strconv"
	"strings"
	"time"
)

// Severities of an instrument error (Profile.ErrorSeverity).
const (
	SeverityWarn = "warn"
	SeverityFail = "fail"
)

// parseCodeRange reads "-310" or "-399..-300" (inclusive, either order).
func parseCodeRange(k string) (lo, hi int, err error) {
	a, b, isRange := strings.Cut(strings.TrimSpace(k), "..")
	lo, err = strconv.Atoi(strings.TrimSpace(a))
	if err != nil {
		return 0, 0, fmt.Errorf("%q: want an error code or a range of codes like -399..-300", k)
	}
	hi = lo
	if isRange {
		hi, err = strconv.Atoi(strings.TrimSpace(b))
		if err != nil {
			return 0, 0, fmt.Errorf("%q: want an error code or a range of codes like -399..-300", k)
		}
	}
	if lo > hi {
		lo, hi = hi, lo
	}
	return lo, hi, nil
}

// Severity returns what an error code means for a run: SeverityWarn or
// SeverityFail, per ErrorSeverity (an exact code before a range, the
// narrowest range first); a code it does not name is SeverityFail.
func (p Profile) Severity(code int) string {
	best, width := SeverityFail, -1
	for k, v := range p.ErrorSeverity {
		lo, hi, err := parseCodeRange(k)
		if err != nil || code < lo || code > hi {
			continue
		}
		if w := hi - lo; width < 0 || w < width {
			best, width = v, w
		}
	}
	return best
}

// ErrorPollPeriod is how often a run polls the error queue; 0 never (no
// error query, or error_poll: off).
func (p Profile) ErrorPollPeriod() time.Duration {
	if p.ErrorQuery == "" || p.ErrorPoll == "off" {
		return 0
	}
	d, err := time.ParseDuration(p.ErrorPoll)
	if err != nil || d <= 0 {
		return time.Second
	}
	return d
}
