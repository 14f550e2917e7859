package sim

import (
	"encoding/json"
	"os"
	"os/exec"
	"strings"
	"testing"
)

// debianPython is Debian's interpreter, which python3-serial installs into
// (not a python found first on PATH).
const debianPython = "/usr/bin/python3"

// TestPyserialClient opens a simulated port with a general-purpose serial
// client nobody here wrote — Debian's python3-serial — and checks that
// *IDN? gives four comma-separated fields and SYST:ERR? `0,"No error"`
// (IEEE 488.2 §10.14 *IDN? response; SCPI-99 §21.8 error queue).
// Without python3-serial the test is skipped, except under CI=true, where
// it fails: CI installs the package.
func TestPyserialClient(t *testing.T) {
	if err := exec.Command(debianPython, "-c", "import serial").Run(); err != nil {
		msg := "python3-serial is not installed (apt-get install python3-serial): " + err.Error()
		if os.Getenv("CI") == "true" {
			t.Fatal(msg)
		}
		t.Skip(msg)
	}
	b, _ := startBench(t, demoBench(t))
	for role, path := range b.Ports() {
		out, err := exec.Command(debianPython, "testdata/idn_client.py", path).CombinedOutput()
		if err != nil {
			t.Fatalf("%s: %v\n%s", role, err, out)
		}
		var got map[string]string
		if err := json.Unmarshal(out, &got); err != nil {
			t.Fatalf("%s: %v: %s", role, err, out)
		}
		if f := strings.Split(got["*IDN?"], ","); len(f) != 4 || f[0] == "" || f[1] == "" {
			t.Errorf("%s: *IDN? = %q, want four fields", role, got["*IDN?"])
		}
		if got["SYST:ERR?"] != `0,"No error"` {
			t.Errorf("%s: SYST:ERR? = %q", role, got["SYST:ERR?"])
		}
		t.Logf("%s on %s: %s", role, path, out)
	}
}
