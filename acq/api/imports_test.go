package api

import (
	"context"
	"encoding/json"
	"errors"
	"io"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"
	"time"

	"hystd/acq/config"
	"hystd/acq/imports"
	"hystd/acq/imports/importstest"
	"hystd/acq/record"
	"hystd/acq/store/memstore"
)

// importRunner imports into a memstore with the test fixture and specimen
// of acq/imports (the daemon does the same with its config's).
type importRunner struct {
	st *memstore.Store
	fx config.Fixture
	sp config.Specimen
}

func (importRunner) Submit(context.Context, string, []byte) (string, error) {
	return "", errors.New("no")
}
func (importRunner) Abort(context.Context, string) error { return errors.New("no") }
func (r importRunner) Import(ctx context.Context, fixture, specimen, name string, data []byte) (record.Run, []record.Loop, error) {
	if fixture != r.fx.Name || specimen != r.sp.ID {
		return record.Run{}, nil, badRequestf("unknown fixture or specimen")
	}
	return imports.Import(ctx, imports.Options{File: name, Data: data, Fixture: r.fx, Specimen: r.sp,
		Now: time.Date(2026, 3, 4, 9, 0, 0, 0, time.UTC), Writer: r.st})
}

func TestImportEndpoint(t *testing.T) {
	fx, err := config.LoadFixture("../imports/testdata/fixture-import.yaml")
	if err != nil {
		t.Fatal(err)
	}
	sp, err := config.LoadSpecimen("../imports/testdata/specimen-direct.yaml")
	if err != nil {
		t.Fatal(err)
	}
	st := memstore.New(time.Now)
	h, err := New(Options{Reader: st, Runner: importRunner{st, fx, sp}, Token: "s3cret"})
	if err != nil {
		t.Fatal(err)
	}
	srv := httptest.NewServer(h)
	defer srv.Close()
	post := func(token, query, body string) (int, string) {
		req, _ := http.NewRequest("POST", srv.URL+"/api/v1/imports?"+query, strings.NewReader(body))
		req.Header.Set("Content-Type", "text/csv")
		if token != "" {
			req.Header.Set("Authorization", "Bearer "+token)
		}
		resp, err := http.DefaultClient.Do(req)
		if err != nil {
			t.Fatal(err)
		}
		defer resp.Body.Close()
		b, _ := io.ReadAll(resp.Body)
		return resp.StatusCode, string(b)
	}
	q := "fixture=hollin-ring-1&specimen=HX-001&name=old.csv"
	if code, _ := post("", q, importstest.CoarseTanh()); code != http.StatusUnauthorized {
		t.Errorf("no token: %d, want 401", code)
	}
	code, body := post("s3cret", q, "t,I (mA),psi\n0,0,0\n1,zero,0\n")
	if code != http.StatusBadRequest || !strings.Contains(body, "old.csv:3: column I:") {
		t.Errorf("bad file: %d %s", code, body)
	}
	if runs, _ := st.Runs(context.Background(), record.RunFilter{}); len(runs) != 0 {
		t.Fatalf("%d runs stored by refused requests", len(runs))
	}
	code, body = post("s3cret", q, importstest.CoarseTanh())
	if code != http.StatusCreated {
		t.Fatalf("import: %d %s", code, body)
	}
	var rep struct {
		RunID      string                       `json:"run_id"`
		Provenance string                       `json:"provenance"`
		Loops      []map[string]json.RawMessage `json:"loops"`
	}
	if err := json.Unmarshal([]byte(body), &rep); err != nil {
		t.Fatal(err)
	}
	if len(rep.Loops) != 1 || !strings.HasPrefix(rep.Provenance, "imported from old.csv (sha256 ") {
		t.Fatalf("reply %s", body)
	}
	for _, k := range []string{"hmax_a_m", "bmax_t", "br_t", "hcb_a_m", "hcj_a_m", "mu_a", "loss_j_m3", "bhmax_j_m3"} {
		if _, ok := rep.Loops[0][k]; !ok {
			t.Errorf("key %s missing: %s", k, body)
		}
	}
	if _, err := st.Run(context.Background(), rep.RunID); err != nil {
		t.Errorf("stored run: %v", err)
	}
}
