package influx_test

import (
	"bufio"
	"context"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"hystd/acq/influx"
	"hystd/acq/influx/vmtest"
)

// TestVMReadmeQueries runs every PromQL line of README.md's example block
// against a real VictoriaMetrics holding a run recorded two hours ago, and
// requires an answer from each; it also shows the staleness the README
// warns about: the instant selector without a range returns nothing.
func TestVMReadmeQueries(t *testing.T) {
	srv := vmtest.Start(t)
	st := openStore(t, filepath.Join(t.TempDir(), "hystd.db"))
	now := time.Now()
	const id = "readme-run-1"
	demoRun(t, st, id, now.Add(-2*time.Hour), 1, 300)
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	if _, err := influx.DeliverAll(ctx, st, vmConfig(srv.URL)); err != nil {
		t.Fatal(err)
	}
	if _, err := srv.WaitCount(ctx, `hyst_sample_B{run="`+id+`"}`, 1); err != nil {
		t.Fatal(err)
	}
	queries := readmeBlock(t, "promql", false)
	if len(queries) < 4 {
		t.Fatalf("README.md's promql block holds %d queries", len(queries))
	}
	// The README's run id and specimen stand for the ones stored here.
	fix := strings.NewReplacer("aldermoor-ring-2-20261201T230230Z-1ec464", id, "R17-003", "R-17")
	for _, q := range queries {
		q = fix.Replace(q)
		res, err := srv.Query(ctx, q, now)
		if err != nil {
			t.Errorf("%s: %v", q, err)
			continue
		}
		if len(res) == 0 {
			t.Errorf("%s: empty answer", q)
			continue
		}
		t.Logf("%s: %d series", q, len(res))
	}
	stale := `hyst_sample_B{run="` + id + `", loop="1"}`
	if res, err := srv.Query(ctx, stale, now); err != nil || len(res) != 0 {
		t.Errorf("instant %s two hours after the loop: %d series (%v); the README says none", stale, len(res), err)
	}
}

// readmeBlock returns the non-comment lines of the first ```lang block of
// README.md; with statements, lines up to a blank line are joined into one.
func readmeBlock(t *testing.T, lang string, statements bool) []string {
	t.Helper()
	f, err := os.Open("../../README.md")
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	var out []string
	in, joined := false, false
	sc := bufio.NewScanner(f)
	for sc.Scan() {
		line := strings.TrimSpace(sc.Text())
		switch {
		case !in && line == "```"+lang:
			in = true
		case in && line == "```":
			return out
		case in && line == "":
			joined = false
		case in && !strings.HasPrefix(line, "#"):
			if statements && joined {
				out[len(out)-1] += " " + line
			} else {
				out = append(out, line)
			}
			joined = true
		}
	}
	t.Fatalf("no ```%s block in README.md", lang)
	return nil
}
