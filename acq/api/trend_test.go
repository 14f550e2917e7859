package api

import (
	"encoding/json"
	"net/http"
	"strings"
	"testing"
	"time"

	"hystd/acq/record"
)

// trendOf fetches a trend and returns its points as (run, verdict) strings.
func trendOf(t *testing.T, e *env, query string) (int, []string) {
	t.Helper()
	resp, err := http.Get(e.srv.URL + "/api/v1/trend?" + query)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	var body struct {
		Points []struct {
			RunID   string  `json:"run_id"`
			Verdict string  `json:"verdict"`
			Amp     float64 `json:"amplitude"`
			Kind    string  `json:"kind"`
		} `json:"points"`
	}
	if resp.StatusCode != 200 {
		return resp.StatusCode, nil
	}
	if err := json.NewDecoder(resp.Body).Decode(&body); err != nil {
		t.Fatal(err)
	}
	var out []string
	for _, p := range body.Points {
		out = append(out, p.RunID+":"+p.Kind+":"+p.Verdict)
	}
	return 200, out
}

// TestTrendFiltered: a trend compares like with like — filtered by loop
// kind, amplitude within a tolerance, recipe and fixture — and each point
// is judged with its U under the decision rule (limits given), or carries
// the verdict stored with its loop. RUN-A and RUN-B hold HcB 400 ± 3 and
// 410 ± 3 A/m at 6 kA/m; RUN-D a 30 A/m normal curve of the same specimen.
func TestTrendFiltered(t *testing.T) {
	e := newEnvEdit(t, Options{Token: testToken}, func(l *record.Loop) {
		if l.RunID == "RUN-B" {
			l.Verdicts = []record.Verdict{{Grade: "G", Figure: "HcB", Value: 410, U: 3, Max: 405, Rule: "guarded-U", Outcome: record.Fail}}
		}
	})
	l := tanhLoop("RUN-D", 50, 30, 5, 900, 0.1)
	l.Kind = "normal-curve"
	put(t, e.store, record.Run{ID: "RUN-D", Recipe: "ring-normal-curve", Fixture: "ring-bench", Specimen: "R-17", Material: "FeSi3",
		State: record.Finished, Started: t0.Add(72 * time.Hour)}, l)
	base := "specimen=R-17&figure=HcB"
	cases := []struct {
		q    string
		want string
	}{
		{base, "RUN-A::,RUN-B::,RUN-D::"}, // unfiltered: as before
		{base + "&amplitude=6000", "RUN-A:loop:,RUN-B:loop:fail"},
		{base + "&amplitude=5800&tol=0.05", "RUN-A:loop:,RUN-B:loop:fail"}, // 6000 is within 5 % of 5800
		{base + "&amplitude=5800&tol=0.01", ""},
		{base + "&kind=normal-curve", "RUN-D:normal-curve:"},
		{base + "&recipe=ring-soft-loop&fixture=ring-bench", "RUN-A:loop:,RUN-B:loop:fail"},
		// hi = 405: 400 + 3 ≤ 405 passes, 410 − 3 > 405 fails (guarded-U).
		{base + "&amplitude=6000&hi=405", "RUN-A:loop:pass,RUN-B:loop:fail"},
		// hi = 402: 400 ± 3 straddles it.
		{base + "&amplitude=6000&hi=402", "RUN-A:loop:undecided,RUN-B:loop:fail"},
		{base + "&amplitude=6000&hi=402&rule=simple", "RUN-A:loop:pass,RUN-B:loop:fail"},
		{base + "&amplitude=6000&lo=395&hi=420", "RUN-A:loop:pass,RUN-B:loop:pass"},
	}
	for _, tc := range cases {
		code, got := trendOf(t, e, tc.q)
		if code != 200 || strings.Join(got, ",") != tc.want {
			t.Errorf("%s: %d %v, want %s", tc.q, code, got, tc.want)
		}
	}
	// Without given limits, the grade's limits come from the stored verdicts.
	resp, err := http.Get(e.srv.URL + "/api/v1/trend?" + base + "&amplitude=6000&tol=0.05")
	if err != nil {
		t.Fatal(err)
	}
	var lim struct {
		Limits struct {
			Hi     float64 `json:"hi"`
			Rule   string  `json:"rule"`
			Source string  `json:"source"`
		} `json:"limits"`
	}
	err = json.NewDecoder(resp.Body).Decode(&lim)
	resp.Body.Close()
	if err != nil || lim.Limits.Hi != 405 || lim.Limits.Source != "grade G" || lim.Limits.Rule != "guarded-U" {
		t.Errorf("grade limits %+v %v", lim, err)
	}
	for _, q := range []string{base + "&tol=2", base + "&amplitude=big", base + "&lo=5&hi=1", base + "&rule=lenient", base + "&colour=red"} {
		if code, _ := trendOf(t, e, q); code != 400 {
			t.Errorf("%s: %d, want 400", q, code)
		}
	}
}
