package api_test

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"net/http"
	"net/http/httptest"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/chromedp/chromedp"

	"hystd/acq/api"
	"hystd/acq/record"
	"hystd/acq/reprocess"
	"hystd/acq/store"
)

// reprocessRunner re-processes on a store as the daemon does
// (daemon.Daemon.Reprocess: the body's documents, then reprocess.Run).
type reprocessRunner struct{ st *store.Store }

func (reprocessRunner) Submit(context.Context, string, []byte) (string, error) {
	return "", errors.New("no fixture")
}
func (reprocessRunner) Abort(context.Context, string) error { return errors.New("no fixture") }
func (r reprocessRunner) Reprocess(ctx context.Context, id string, body []byte, by string) (record.Revision, []record.Loop, error) {
	fx, sp, err := reprocess.ParseChange("request body", body)
	if err != nil {
		return record.Revision{}, nil, err
	}
	res, err := reprocess.Run(ctx, r.st, reprocess.Options{RunID: id, Fixture: fx, Specimen: sp, By: by,
		Now: time.Date(2026, 12, 2, 9, 0, 0, 0, time.UTC)})
	return res.Revision, res.Loops, err
}

// v4Server serves a copy of the real schema-4 store (acq/store/testdata/v4.db)
// and returns the run of the magnet specimen HX-002 and that specimen's
// file with twice the area.
func v4Server(t *testing.T) (*httptest.Server, string, string) {
	t.Helper()
	src, err := os.ReadFile("../store/testdata/v4.db")
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "hystd.db")
	if err := os.WriteFile(path, src, 0o600); err != nil {
		t.Fatal(err)
	}
	st, err := store.Open(context.Background(), path)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { st.Close() })
	runs, err := st.Runs(context.Background(), record.RunFilter{Specimen: "HX-002"})
	if err != nil || len(runs) != 1 {
		t.Fatalf("%v %v", runs, err)
	}
	sp, err := os.ReadFile("../store/testdata/v4-source/specimen-magnet.yaml")
	if err != nil {
		t.Fatal(err)
	}
	h, err := api.New(api.Options{Reader: st, Runner: reprocessRunner{st}, Token: browserToken})
	if err != nil {
		t.Fatal(err)
	}
	srv := httptest.NewServer(h)
	t.Cleanup(srv.Close)
	return srv, runs[0].ID, strings.Replace(string(sp), "area_mm2: 50", "area_mm2: 100", 1)
}

func send(t *testing.T, method, url, token, ctype, body string) (int, string) {
	t.Helper()
	req, err := http.NewRequest(method, url, strings.NewReader(body))
	if err != nil {
		t.Fatal(err)
	}
	if token != "" {
		req.Header.Set("Authorization", "Bearer "+token)
	}
	if ctype != "" {
		req.Header.Set("Content-Type", ctype)
	}
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	b, _ := io.ReadAll(resp.Body)
	return resp.StatusCode, string(b)
}

type runReply struct {
	Run struct {
		Revision  int `json:"revision"`
		Specimen  string
		Revisions []struct {
			N      int    `json:"n"`
			By     string `json:"by"`
			Change string `json:"change"`
		} `json:"revisions"`
	} `json:"run"`
	Loops []struct {
		Figures []struct {
			Name  string  `json:"name"`
			Value float64 `json:"value"`
		} `json:"figures"`
	} `json:"loops"`
}

// TestReprocessAPI: POST /runs/{id}/reprocess needs the token and YAML, and
// refuses a body that is not a specimen or fixture; with a specimen of twice
// the area it stores revision 2 (recorded as made by "shared-token", the shared
// token's name) whose figures that scale with B are half those of revision
// 1, which stays readable: the run, its loops and plots at ?revision=1 and 2.
func TestReprocessAPI(t *testing.T) {
	srv, run, doubled := v4Server(t)
	u := srv.URL + "/api/v1/runs/" + run + "/reprocess"
	for _, c := range []struct {
		token, ctype, body string
		code               int
	}{
		{"", "application/yaml", doubled, http.StatusUnauthorized},
		{browserToken, "text/csv", doubled, http.StatusUnsupportedMediaType},
		{browserToken, "", doubled, http.StatusUnsupportedMediaType},
		{browserToken, "application/yaml", "", http.StatusBadRequest},
		{browserToken, "application/yaml", "kind: recipe\nname: x\n", http.StatusBadRequest},
		{browserToken, "application/yaml", "kind: specimen\nid: [\n", http.StatusBadRequest},
		{browserToken, "application/yaml", doubled + "---\n" + doubled, http.StatusBadRequest},
	} {
		if code, body := send(t, "POST", u, c.token, c.ctype, c.body); code != c.code {
			t.Errorf("token %q type %q body %.30q: %d %s, want %d", c.token, c.ctype, c.body, code, body, c.code)
		}
	}
	if code, body := send(t, "GET", srv.URL+"/api/v1/runs/"+run+"?revision=2", "", "", ""); code != http.StatusNotFound {
		t.Fatalf("revision 2 before any re-process: %d %s", code, body)
	}
	code, body := send(t, "POST", u, browserToken, "application/yaml", doubled)
	if code != http.StatusCreated {
		t.Fatalf("reprocess: %d %s", code, body)
	}
	var rep struct {
		Revision struct {
			N      int    `json:"n"`
			By     string `json:"by"`
			Change string `json:"change"`
		} `json:"revision"`
		Loops []map[string]any `json:"loops"`
	}
	if err := json.Unmarshal([]byte(body), &rep); err != nil || rep.Revision.N != 2 || rep.Revision.By != api.SharedTokenUser ||
		rep.Revision.Change != "specimen.direct.area_mm2: 50 → 100" || len(rep.Loops) != 1 {
		t.Fatalf("reply %s (%v)", body, err)
	}
	get := func(q string) runReply {
		code, body := send(t, "GET", srv.URL+"/api/v1/runs/"+run+q, "", "", "")
		if code != http.StatusOK {
			t.Fatalf("GET run%s: %d %s", q, code, body)
		}
		var r runReply
		if err := json.Unmarshal([]byte(body), &r); err != nil {
			t.Fatal(err)
		}
		return r
	}
	latest, r1, r2 := get(""), get("?revision=1"), get("?revision=2")
	if latest.Run.Revision != 2 || r1.Run.Revision != 1 || len(latest.Run.Revisions) != 2 || latest.Run.Revisions[1].By != api.SharedTokenUser ||
		latest.Run.Revisions[0].By != "bay 3" {
		t.Fatalf("revisions: latest %+v, r1 %+v", latest.Run, r1.Run)
	}
	fig := func(r runReply, name string) float64 {
		for _, f := range r.Loops[0].Figures {
			if f.Name == name {
				return f.Value
			}
		}
		t.Fatalf("no %s", name)
		return 0
	}
	for _, name := range []string{"Br", "Bmax", "BHmax", "loss_j_m3"} {
		if a, b := fig(r1, name), fig(r2, name); b != a/2 || fig(latest, name) != b {
			t.Errorf("%s: revision 1 %v, revision 2 %v, latest %v", name, a, b, fig(latest, name))
		}
	}
	if fig(r1, "HcB") != fig(r2, "HcB") {
		t.Errorf("HcB changed")
	}
	for _, q := range []string{"?revision=1", "?revision=2"} {
		if code, body := send(t, "GET", srv.URL+"/api/v1/runs/"+run+"/loops/1"+q, "", "", ""); code != http.StatusOK || !strings.Contains(body, `"points"`) {
			t.Errorf("loop %s: %d %.100s", q, code, body)
		}
		if code, body := send(t, "GET", srv.URL+"/api/v1/runs/"+run+"/loops/1/plot"+q, "", "", ""); code != http.StatusOK || !strings.Contains(body, "<svg") {
			t.Errorf("plot %s: %d %.100s", q, code, body)
		}
	}
	for _, q := range []string{"?revision=3", "?revision=0", "?revision=x"} {
		if code, _ := send(t, "GET", srv.URL+"/api/v1/runs/"+run+"/loops/1"+q, "", "", ""); code != http.StatusNotFound && code != http.StatusBadRequest {
			t.Errorf("loop %s: %d", q, code)
		}
	}
}

// TestBrowserRevisions: the page lists a re-processed run's revisions and
// switches between them; the figures table follows (Br of revision 1 is
// twice that of revision 2).
func TestBrowserRevisions(t *testing.T) {
	if testing.Short() {
		t.Skip("browser test: skipped with -short")
	}
	chromium := findChromium(t)
	srv, run, doubled := v4Server(t)
	if code, body := send(t, "POST", srv.URL+"/api/v1/runs/"+run+"/reprocess", browserToken, "application/yaml", doubled); code != http.StatusCreated {
		t.Fatalf("reprocess: %d %s", code, body)
	}
	b := newBrowser(t, chromium)
	b.do(chromedp.Navigate(srv.URL + "/"))
	b.wait("run listed", fmt.Sprintf(`!!document.querySelector('#runs-list li[data-run-id=%q]')`, run), 20*time.Second)
	b.do(chromedp.Evaluate[chromedp.Void](fmt.Sprintf(`document.querySelector('#runs-list li[data-run-id=%q]').click()`, run)))
	b.wait("latest revision shown", fmt.Sprintf(`document.body.dataset.revision === %q && document.body.dataset.loop === %q`, run+"@2", run+"#1"), 20*time.Second)
	if n := js[int](b, `document.querySelectorAll('#run-revisions button').length`); n != 2 {
		t.Fatalf("%d revision buttons, want 2", n)
	}
	text := js[string](b, `document.querySelector('#run-revisions').textContent`)
	if !strings.Contains(text, "by "+api.SharedTokenUser+": specimen.direct.area_mm2: 50 → 100") || !strings.Contains(text, "by bay 3: as recorded") {
		t.Errorf("revision list: %q", text)
	}
	br := func() string {
		return js[string](b, `document.querySelector('#figures tr[data-figure="Br"] .vu').textContent`)
	}
	br2 := br()
	b.shot("revisions-latest")
	b.do(chromedp.Evaluate[chromedp.Void](`document.querySelector('#run-revisions button[data-rev="1"]').click()`))
	b.wait("revision 1 shown", fmt.Sprintf(`document.body.dataset.revision === %q && document.body.dataset.loop === %q`, run+"@1", run+"#1"), 20*time.Second)
	br1 := br()
	// GUM-rounded text: 0.723021 ± 0.000084 T and 1.44604 ± 0.00017 T.
	if !strings.HasPrefix(br2, "0.7230") || !strings.HasPrefix(br1, "1.4460") {
		t.Errorf("Br shown: revision 2 %q, revision 1 %q", br2, br1)
	}
	if !js[bool](b, `document.querySelector('#run-revisions button[data-rev="1"]').classList.contains('on')`) {
		t.Error("revision 1 not marked as shown")
	}
	if href := js[string](b, `document.querySelector('#dl-svg').getAttribute('href') || ''`); !strings.Contains(href, "revision=1") {
		t.Errorf("plot link %q does not name revision 1", href)
	}
}
