package loopcsv

import (
	"strconv"
	"strings"
	"testing"

	"hystd/calib/synth"
)

// loop1M is a 1 000 001-row CSV (t, H, B, 7 significant digits) of ten
// cycles of the tanh loop with noise on B.
func loop1M() string {
	sw := synth.Sweep{Hm: 1000, Cycles: 10, PerBranch: 50000, Dt: 1e-5, Start: "tip", NoiseB: 2e-4, Draw: 18}
	t, h, b := sw.Generate(synth.Tanh{Bs: 1.5, Hc: 50, A: 40, Ai: 60})
	var sb strings.Builder
	sb.WriteString("t,H,B\n")
	var buf []byte
	for i := range h {
		buf = strconv.AppendFloat(buf[:0], t[i], 'g', 9, 64)
		buf = append(buf, ',')
		buf = strconv.AppendFloat(buf, h[i], 'g', 7, 64)
		buf = append(buf, ',')
		buf = strconv.AppendFloat(buf, b[i], 'g', 7, 64)
		buf = append(buf, '\n')
		sb.Write(buf)
	}
	return sb.String()
}

// BenchmarkRead1M: Read on a 1 M-row file in memory (the splitter);
// BenchmarkReadEncodingCSV1M, its peer in the same run, reads the same
// text through encoding/csv (the path files with quotes take, and the
// path every file took before the splitter).
func BenchmarkRead1M(b *testing.B) {
	s := loop1M()
	b.SetBytes(int64(len(s)))
	b.ReportAllocs()
	for b.Loop() {
		if _, err := Read(strings.NewReader(s), "bench.csv", Options{}); err != nil {
			b.Fatal(err)
		}
	}
}

func BenchmarkReadEncodingCSV1M(b *testing.B) {
	s := loop1M()
	b.SetBytes(int64(len(s)))
	b.ReportAllocs()
	for b.Loop() {
		if _, err := readQuoted(s, ',', "bench.csv", Options{}); err != nil {
			b.Fatal(err)
		}
	}
}
