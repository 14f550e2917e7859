package api

import (
	"bytes"
	"io"
	"net/http"
	"strings"
	"testing"
)

// TestReportEndpoint: GET /api/v1/runs/{id}/report answers a PDF (the
// content itself is checked in acq/report with poppler); unknown runs 404,
// query parameters 400.
func TestReportEndpoint(t *testing.T) {
	e := newEnv(t, Options{Token: testToken})
	resp, err := http.Get(e.srv.URL + "/api/v1/runs/RUN-A/report")
	if err != nil {
		t.Fatal(err)
	}
	body, _ := io.ReadAll(resp.Body)
	resp.Body.Close()
	if resp.StatusCode != 200 || resp.Header.Get("Content-Type") != "application/pdf" || !bytes.HasPrefix(body, []byte("%PDF-")) ||
		!strings.Contains(resp.Header.Get("Content-Disposition"), `filename="RUN-A.pdf"`) {
		t.Fatalf("report: %d %v %q", resp.StatusCode, resp.Header, body[:min(len(body), 40)])
	}
	for path, want := range map[string]int{"/api/v1/runs/NOPE/report": 404, "/api/v1/runs/RUN-A/report?x=1": 400} {
		if code, _, _ := e.do(t, "GET", path, "", "", nil); code != want {
			t.Errorf("%s: %d, want %d", path, code, want)
		}
	}
}

// TestSpecimenAndMountWithoutSupport: a runner that cannot choose a
// specimen refuses ?specimen= with 400 and changes nothing; one without
// mount confirmation lists no waiting runs and answers 503 to a confirmation.
func TestSpecimenAndMountWithoutSupport(t *testing.T) {
	e := newEnv(t, Options{Token: testToken})
	code, body, _ := e.do(t, "POST", "/api/v1/runs?specimen=S-1", testToken, "application/yaml", strings.NewReader("kind: recipe\nname: x\n"))
	if code != 400 || !strings.Contains(body["error"].(string), "cannot choose a specimen") {
		t.Errorf("submit with specimen: %d %v", code, body)
	}
	if code, _, _ := e.do(t, "POST", "/api/v1/runs/RUN-A/mount", testToken, "", nil); code != 503 {
		t.Errorf("mount: %d", code)
	}
	resp, err := http.Get(e.srv.URL + "/api/v1/mounts")
	if err != nil {
		t.Fatal(err)
	}
	b, _ := io.ReadAll(resp.Body)
	resp.Body.Close()
	if resp.StatusCode != 200 || strings.TrimSpace(string(b)) != "[]" {
		t.Errorf("mounts: %d %s", resp.StatusCode, b)
	}
}
