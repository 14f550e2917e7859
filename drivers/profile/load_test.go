package profile

import (
	"flag"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"hystd/configs"
)

var update = flag.Bool("update", false, "rewrite the golden .err files")

// TestShippedProfilesLoad loads every profile in configs/instruments.
func TestShippedProfilesLoad(t *testing.T) {
	names := Names()
	if len(names) < 8 {
		t.Fatalf("only %d shipped profiles: %v", len(names), names)
	}
	for _, n := range names {
		p, err := Load(n)
		if err != nil {
			t.Errorf("%s: %v", n, err)
			continue
		}
		if p.Name != n {
			t.Errorf("%s: name %q differs from the file name", n, p.Name)
		}
	}
}

func TestLoadByPathAndUnknownName(t *testing.T) {
	data, err := configs.Samples.ReadFile("instruments/quill-supply.yaml")
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "mine.yaml")
	os.WriteFile(path, data, 0o644)
	p, err := Load(path)
	if err != nil || p.Name != "quill-supply" || p.Operations[OpSetCurrent].Scale != 1e-3 {
		t.Fatalf("by path: %+v, %v", p.Name, err)
	}
	if p.Operations[OpSetOutput].Scale != 1 || p.Operations[OpReadCurrent].Separator != "," {
		t.Fatal("defaults not filled in")
	}
	_, err = Load("no-such-profile")
	if err == nil || !strings.Contains(err.Error(), "sim-supply") {
		t.Fatalf("got %v, want the shipped names listed", err)
	}
}

// TestInvalidProfiles: each testdata/invalid/NAME.yaml must fail with the
// errors in NAME.err (FILE:LINE: key: problem, one a line).
func TestInvalidProfiles(t *testing.T) {
	files, _ := filepath.Glob("testdata/invalid/*.yaml")
	if len(files) == 0 {
		t.Fatal("no test files")
	}
	for _, f := range files {
		t.Run(filepath.Base(f), func(t *testing.T) {
			data, _ := os.ReadFile(f)
			_, err := Parse(filepath.Base(f), data)
			if err == nil {
				t.Fatal("accepted")
			}
			golden := strings.TrimSuffix(f, ".yaml") + ".err"
			if *update {
				os.WriteFile(golden, []byte(err.Error()+"\n"), 0o644)
			}
			want, _ := os.ReadFile(golden)
			if got := err.Error() + "\n"; got != string(want) {
				t.Fatalf("got\n%s\nwant\n%s", got, want)
			}
		})
	}
}

func TestLineSettings(t *testing.T) {
	p, err := Parse("modem.yaml", []byte(`kind: instrument-profile
name: modem-lines
role: thermometer
serial: {baud: 4800, data_bits: 7, parity: odd, stop_bits: "2", dtr: true, rts: false}
terminators: {write: "\r", read: "\r"}
timeout: 250ms
identity: "T"
operations:
  read_temperature: {query: "T?", parse: number, unit: "°C"}
`))
	if err != nil {
		t.Fatal(err)
	}
	s := p.LineSettings()
	if s.Baud != 4800 || s.DataBits != 7 || s.Parity != "odd" || s.StopBits != "2" || s.Flow != "none" ||
		s.ReadTimeout != 250*time.Millisecond || s.DTR == nil || !*s.DTR || s.RTS == nil || *s.RTS {
		t.Fatalf("settings %+v", s)
	}
	q, _ := Load("sim-supply")
	if s := q.LineSettings(); s.DTR != nil || s.RTS != nil {
		t.Fatal("modem lines driven without being asked")
	}
}
