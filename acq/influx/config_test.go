package influx

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

func TestLoadConfig(t *testing.T) {
	good := "kind: influx\nurl: https://tsdb.lab.example:8086\norg: lab\nbucket: hystd\ngzip: true\nbatch_size: 2000\ntimeout: 10s\n"
	c, err := LoadConfig("influx.yaml", []byte(good))
	if err != nil {
		t.Fatal(err)
	}
	if c.BatchSize != 2000 || !c.Gzip || c.Timeout.D() != 10*time.Second || c.MinBackoff.D() != DefaultMinBackoff || c.TokenEnv != DefaultTokenEnv {
		t.Fatalf("loaded %+v", c)
	}
	tests := []struct {
		name, yaml, want string
	}{
		{"unknown key", "kind: influx\nurl: http://h:1\nbucket: b\ntoken: abc\n", "influx.yaml:4: token"},
		{"no kind", "url: http://h:1\nbucket: b\n", "influx.yaml:1: kind: required"},
		{"bad url", "kind: influx\nurl: h:1\nbucket: b\n", `influx.yaml:2: url: "h:1" is not an http:// or https:// URL`},
		{"credentials in url", "kind: influx\nurl: http://u:p@h:1\nbucket: b\n", "influx.yaml:2: url: must not carry credentials"},
		{"no bucket", "kind: influx\nurl: http://h:1\n", "influx.yaml:1: bucket: required"},
		{"batch too big", "kind: influx\nurl: http://h:1\nbucket: b\nbatch_size: 1000000\n", "influx.yaml:4: batch_size: 1000000 is outside"},
		{"duration without unit", "kind: influx\nurl: http://h:1\nbucket: b\ntimeout: 5\n", "influx.yaml:4: timeout: duration \"5\" has no unit"},
		{"backoff order", "kind: influx\nurl: http://h:1\nbucket: b\nmin_backoff: 1m\nmax_backoff: 1s\n", "influx.yaml:5: max_backoff: 1s is shorter"},
		{"missing token file", "kind: influx\nurl: http://h:1\nbucket: b\ntoken_file: /nonexistent/tok\n", "influx.yaml:4: token_file: cannot read /nonexistent/tok"},
		{"missing ca", "kind: influx\nurl: http://h:1\nbucket: b\ntls:\n  ca_file: /nonexistent/ca.pem\n", "influx.yaml:5: tls.ca_file: cannot read"},
		{"wrong type", "kind: influx\nurl: http://h:1\nbucket: b\ngzip: yes please\n", "influx.yaml:4: gzip"},
	}
	for _, tc := range tests {
		_, err := LoadConfig("influx.yaml", []byte(tc.yaml))
		if err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%s: error %v, want it to contain %q", tc.name, err, tc.want)
		}
	}
}

func TestCAFileNotPEM(t *testing.T) {
	ca := filepath.Join(t.TempDir(), "ca.pem")
	os.WriteFile(ca, []byte("not a certificate"), 0o644)
	cfg := Config{URL: "https://h:1", Bucket: "b", TLS: TLS{CAFile: ca}}
	if _, err := New(cfg, nil, Options{}); err == nil || !strings.Contains(err.Error(), "no PEM certificate") {
		t.Fatalf("non-PEM CA file: %v", err)
	}
}

func TestSampleConfig(t *testing.T) {
	data, err := os.ReadFile(filepath.Join("testdata", "influx.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	c, err := LoadConfig("testdata/influx.yaml", data)
	if err != nil {
		t.Fatal(err)
	}
	if c.URL != "http://127.0.0.1:8428" || c.Bucket != "hysteresis" || c.MaxBackoff.D() != 2*time.Minute {
		t.Fatalf("sample config %+v", c)
	}
}
