package influx

import (
	"bytes"
	"math"
	"strings"
	"testing"

	"hystd/acq/record"
)

// TestVerdictsInLineProtocol: a judged loop's figure point carries the
// grade, rule and worst verdict as tags and one NAME_verdict field per
// judged figure (1 pass, 0 undecided, −1 fail); sample points carry none.
func TestVerdictsInLineProtocol(t *testing.T) {
	l := smallLoop()
	l.Verdicts = []record.Verdict{
		{Grade: "TAPE-50", Figure: "Br", Value: 0.6, U: 0.01, Min: 0.5, Max: math.NaN(), Unit: "T", Rule: "guarded-U", Outcome: record.Pass},
		{Grade: "TAPE-50", Figure: "HcB", Value: 12, U: 3, Min: math.NaN(), Max: 14, Unit: "A/m", Rule: "guarded-U", Outcome: record.Undecided},
	}
	var buf bytes.Buffer
	if _, err := WriteLineProtocol(&buf, smallRun(), l); err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(strings.TrimSpace(buf.String()), "\n")
	fig := lines[len(lines)-1]
	for _, want := range []string{FigureMeasurement + ",", "grade=TAPE-50", "rule=guarded-U", "verdict=undecided", "Br_verdict=1", "HcB_verdict=0"} {
		if !strings.Contains(fig, want) {
			t.Errorf("figure line lacks %q:\n%s", want, fig)
		}
	}
	for _, ln := range lines[:len(lines)-1] {
		if strings.Contains(ln, "verdict") {
			t.Errorf("sample line with a verdict: %s", ln)
		}
	}
}
