package loopcsv

import (
	"bytes"
	"testing"
)

// FuzzAnalyze feeds arbitrary bytes through Read and Analyze: any input
// must give a result or an error, never a panic.
func FuzzAnalyze(f *testing.F) {
	f.Add([]byte("H,B\n1000,1.5\n-1000,-1.5\n1000,1.5\n"))
	f.Add([]byte("t,H,B\n0,0,0\n1,10,1\n2,-10,-1\n3,10,1\n4,-10,-1\n"))
	f.Add([]byte("H,B\n1,1\n1,1\n1,1\n"))
	f.Add([]byte("B,H\n0,0\n0,1e308\n0,-1e308\n0,1e308\n"))
	f.Add([]byte("H,B\n\"1\",2\n"))
	f.Fuzz(func(t *testing.T, data []byte) {
		d, err := Read(bytes.NewReader(data), "fuzz.csv", Options{})
		if err != nil {
			return
		}
		r, err := Analyze(d, "fuzz.csv")
		if err != nil {
			return
		}
		var out bytes.Buffer
		if err := r.WriteJSON(&out); err != nil {
			t.Fatal(err)
		}
		_ = r.WriteTable(&out)
	})
}
