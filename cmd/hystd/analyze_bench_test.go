package main

import (
	"bufio"
	"bytes"
	"encoding/json"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"

	"hystd/calib/synth"
)

// peerPython returns a Python interpreter that imports all of mods: the
// one named by HYSTD_PEER_PYTHON, else python3 on PATH, else
// /usr/bin/python3 (where Debian's python3-pandas installs). "" if none.
func peerPython(mods ...string) string {
	var cands []string
	if p := os.Getenv("HYSTD_PEER_PYTHON"); p != "" {
		cands = append(cands, p)
	}
	cands = append(cands, "python3", "/usr/bin/python3")
	for _, c := range cands {
		p, err := exec.LookPath(c)
		if err != nil {
			continue
		}
		if exec.Command(p, "-c", "import "+strings.Join(mods, ", ")).Run() == nil {
			return p
		}
	}
	return ""
}

// loadAvg is the 1-minute load average (NaN where /proc is missing).
func loadAvg() float64 {
	raw, err := os.ReadFile("/proc/loadavg")
	if err != nil {
		return math.NaN()
	}
	f := strings.Fields(string(raw))
	v, _ := strconv.ParseFloat(f[0], 64)
	return v
}

// writeLoop1M writes a 1 000 001-row CSV (t, H, B; 7 significant digits,
// as an instrument export) of ten cycles of the tanh loop (Bs 1.5 T, Hc
// 50 A/m) with noise on B.
func writeLoop1M(tb testing.TB, path string) {
	sw := synth.Sweep{Hm: 1000, Cycles: 10, PerBranch: 50000, Dt: 1e-5, Start: "tip", NoiseB: 2e-4, Draw: 18}
	t, h, b := sw.Generate(synth.Tanh{Bs: 1.5, Hc: 50, A: 40, Ai: 60})
	f, err := os.Create(path)
	if err != nil {
		tb.Fatal(err)
	}
	w := bufio.NewWriter(f)
	w.WriteString("# benchmark loop: tanh, Bs 1.5 T, Hc 50 A/m, 10 cycles\nt,H,B\n")
	var buf []byte
	for i := range h {
		buf = strconv.AppendFloat(buf[:0], t[i], 'g', 9, 64)
		buf = append(buf, ',')
		buf = strconv.AppendFloat(buf, h[i], 'g', 7, 64)
		buf = append(buf, ',')
		buf = strconv.AppendFloat(buf, b[i], 'g', 7, 64)
		buf = append(buf, '\n')
		w.Write(buf)
	}
	if err := w.Flush(); err != nil {
		tb.Fatal(err)
	}
	if err := f.Close(); err != nil {
		tb.Fatal(err)
	}
}

// BenchmarkAnalyzeProcess1M runs `hystd analyze FILE --json` (the binary,
// built once) and its peer, testdata/bench/analyze_pandas.py (pandas
// read_csv + numpy, the same figures), on the same 1 M-row file, as
// interleaved pairs whose order alternates; both are whole processes,
// started and waited for. It reports each side's wall time per run
// (hystd-s, pandas-s) and CPU time (user + system), their ratios
// (peer/hystd: above 1 hystd is faster) and the load average. ns/op
// covers a pair. It skips when no Python with pandas and numpy is found
// (Debian: apt-get install python3-pandas python3-numpy).
func BenchmarkAnalyzeProcess1M(b *testing.B) {
	py := peerPython("pandas", "numpy")
	if py == "" {
		b.Skip("no python3 with pandas and numpy (apt-get install python3-pandas python3-numpy; or set HYSTD_PEER_PYTHON)")
	}
	peer, err := filepath.Abs("../../testdata/bench/analyze_pandas.py")
	if err != nil {
		b.Fatal(err)
	}
	dir := b.TempDir()
	bin := filepath.Join(dir, "hystd")
	if out, err := exec.Command("go", "build", "-o", bin, ".").CombinedOutput(); err != nil {
		b.Fatalf("go build: %v\n%s", err, out)
	}
	csv := filepath.Join(dir, "loop-1m.csv")
	writeLoop1M(b, csv)
	run := func(name string, args ...string) (wall, cpu time.Duration, out []byte) {
		cmd := exec.Command(name, args...)
		var so, se bytes.Buffer
		cmd.Stdout, cmd.Stderr = &so, &se
		t0 := time.Now()
		if err := cmd.Run(); err != nil {
			b.Fatalf("%s %v: %v\n%s", name, args, err, se.Bytes())
		}
		wall = time.Since(t0)
		cpu = cmd.ProcessState.UserTime() + cmd.ProcessState.SystemTime()
		return wall, cpu, so.Bytes()
	}
	// The two must agree on the figures (their estimators differ, see the
	// script; 1 % is far below any figure's change between estimators
	// that read different data).
	_, _, gout := run(bin, "analyze", csv, "--json")
	_, _, pout := run(py, peer, csv)
	var gf, pf map[string]any
	if err := json.Unmarshal(gout, &gf); err != nil {
		b.Fatalf("hystd: %v: %s", err, gout)
	}
	if err := json.Unmarshal(pout, &pf); err != nil {
		b.Fatalf("peer: %v: %s", err, pout)
	}
	for _, k := range []string{"hmax_a_m", "bmax_t", "br_t", "hcb_a_m", "hcj_a_m", "mu_a", "loss_j_m3", "bhmax_j_m3"} {
		g, _ := gf[k].(float64)
		p, _ := pf[k].(float64)
		if !(math.Abs(g-p) <= 0.01*math.Abs(g)) {
			b.Fatalf("%s: hystd %g, peer %g", k, g, p)
		}
	}
	load0 := loadAvg()
	var gw, pw, gc, pc time.Duration
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if i%2 == 0 {
			w, c, _ := run(bin, "analyze", csv, "--json")
			gw, gc = gw+w, gc+c
			w, c, _ = run(py, peer, csv)
			pw, pc = pw+w, pc+c
		} else {
			w, c, _ := run(py, peer, csv)
			pw, pc = pw+w, pc+c
			w, c, _ = run(bin, "analyze", csv, "--json")
			gw, gc = gw+w, gc+c
		}
	}
	b.StopTimer()
	n := float64(b.N)
	b.ReportMetric(gw.Seconds()/n, "hystd-s")
	b.ReportMetric(pw.Seconds()/n, "pandas-s")
	b.ReportMetric(pw.Seconds()/gw.Seconds(), "wall-ratio")
	b.ReportMetric(gc.Seconds()/n, "hystd-cpu-s")
	b.ReportMetric(pc.Seconds()/n, "pandas-cpu-s")
	b.ReportMetric(pc.Seconds()/gc.Seconds(), "cpu-ratio")
	b.ReportMetric((load0+loadAvg())/2, "load1")
}
