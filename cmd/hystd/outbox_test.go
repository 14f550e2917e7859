package main

import (
	"bytes"
	"context"
	"errors"
	"math"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"hystd/acq/influx"
	"hystd/acq/influx/vmtest"
	"hystd/acq/store"
)

// runCmd runs hystd with args in this process and returns stdout, stderr and
// the command's exit status (as main would map it).
func runCmd(t *testing.T, args ...string) (string, string, int) {
	t.Helper()
	root := newRoot()
	var out, errb bytes.Buffer
	root.SetOut(&out)
	root.SetErr(&errb)
	root.SetArgs(args)
	err := root.ExecuteContext(context.Background())
	code := 0
	if err != nil {
		code = exitFailed
		var ee *exitError
		if errors.As(err, &ee) {
			code = ee.code
		}
		errb.WriteString("hystd: " + err.Error() + "\n")
	}
	return out.String(), errb.String(), code
}

// TestDemoWrongPathRequeue: `hystd demo` sent to a URL with a typo in its
// path (a real VictoriaMetrics serving under a cluster-style path prefix
// refuses it with HTTP 400) exits with status 3; `hystd outbox list` names
// the refused loops and the server's reason, `hystd outbox requeue RUN`
// makes them pending, and a forwarder with the right URL delivers every
// stored current value.
func TestDemoWrongPathRequeue(t *testing.T) {
	srv := vmtest.Start(t, "-http.pathPrefix=/insert/7/influx")
	dir := t.TempDir()
	wrong := strings.Replace(srv.URL, "/insert/7/", "/insert/7/x/", 1)
	out, errs, code := runCmd(t, "demo", "--data", dir, "--influx-url", wrong, "--influx-bucket", "demo", "--influx-tag", "site=north-lab")
	if code != exitForward {
		t.Fatalf("demo to a wrong path: exit %d, want %d\nstdout:\n%s\nstderr:\n%s", code, exitForward, out, errs)
	}
	if !strings.Contains(errs, "HTTP 400") || strings.Contains(out, "quarantined") {
		t.Errorf("the server's refusal belongs on stderr:\nstdout:\n%s\nstderr:\n%s", out, errs)
	}
	list, _, code := runCmd(t, "outbox", "list", "--data", dir)
	if code != 0 || !strings.Contains(list, "pathPrefix") {
		t.Fatalf("outbox list: exit %d\n%s", code, list)
	}
	runID := strings.Fields(strings.Split(list, "\n")[1])[0]
	rq, rqErr, code := runCmd(t, "outbox", "requeue", runID, "--data", dir)
	if code != 0 || !strings.Contains(rq, "requeued run "+runID) {
		t.Fatalf("outbox requeue %s: exit %d\n%s%s", runID, code, rq, rqErr)
	}
	if _, _, code := runCmd(t, "outbox", "requeue", runID, "--data", dir); code != exitNothing {
		t.Errorf("second requeue: exit %d, want %d", code, exitNothing)
	}

	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	st, err := store.Open(ctx, filepath.Join(dir, "hystd.db"))
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	cfg := influx.Config{URL: srv.URL, Bucket: "demo", TokenEnv: "HYSTD_TEST_NO_TOKEN", Tags: map[string]string{"site": "north-lab"}}
	n, err := influx.DeliverAll(ctx, st, cfg)
	if err != nil || n == 0 {
		t.Fatalf("after requeue: %d points, %v", n, err)
	}
	wantN, wantSum := 0, 0.0
	loops, err := st.Loops(ctx, runID)
	if err != nil {
		t.Fatal(err)
	}
	for _, lh := range loops {
		l, err := st.Loop(ctx, runID, lh.N)
		if err != nil {
			t.Fatal(err)
		}
		for _, s := range l.Raw {
			if !math.IsNaN(s.I) {
				wantN++
				wantSum += s.I
			}
		}
	}
	series, err := srv.WaitCount(ctx, `hyst_sample_I{run="`+runID+`",site="north-lab"}`, wantN)
	if err != nil {
		t.Fatal(err)
	}
	gotSum := 0.0
	for _, s := range series {
		for _, v := range s.Values {
			gotSum += v
		}
	}
	if math.Abs(gotSum-wantSum) > 1e-9*math.Max(1, math.Abs(wantSum)) {
		t.Errorf("sum of the currents read back %g, stored %g", gotSum, wantSum)
	}
	t.Logf("run %s: %d loops requeued and delivered, %d currents read back", runID, len(loops), wantN)
}
