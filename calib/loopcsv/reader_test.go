package loopcsv

import (
	"math"
	"math/rand/v2"
	"reflect"
	"strconv"
	"strings"
	"testing"
)

// The splitter for files without quotes must accept, refuse and report
// exactly what encoding/csv (Go's standard library, the reference here)
// does with the same settings. Each case is read both ways: the values,
// line numbers and error text must be identical.
var plainCases = []string{
	"H,B\n1000,1.5\n-1000,-1.5\n",
	"t,H,B\r\n0,1,2\r\n1,2,3\r\n",
	"# comment\n\nH,B\n# inside\n1,2\n\n3,4",
	"H;B\n1;2\n3;4\r",
	"H,B\n1,2\r\r\n",
	"\ufeffH (Oe), B [mT]\n 1, 2\n\t3,\t4\n",
	"H,B\n1,2\n   \n",
	"H,B\n1,2\n3\n",
	"H,B\n1,2,3\n",
	"H,B\n1,abc\n",
	"H,B\n1,NaN\n",
	"H,B\n1,\u00a02\u00a0\n",
	"H,B\n1,\u20002\n",
	"t (ms),H,B\n5,1,2\n4,1,2\n",
	"t,H,B,x\n0,1,2,\n",
	"H,B\n",
	"# only\n\n",
	"",
	"\r\n\r\nH,B\r\n1,2\r\n",
	" # not a comment\nH,B\n",
	"H,B\n#1,2\n 3,4\n",
	"H,B\n1,2\n\r\n\n5,6\n",
	"H,H,B\n1,2,3\n",
	"x,y\n1,2\n",
	"H\tB\n1\t2\n",
	"H,B\n1e3,0x1p-2\n",
	"H,B\n1,2\x85\n",
	"H,B\n\xff1,2\n",
}

func TestPlainMatchesEncodingCSV(t *testing.T) {
	for _, in := range plainCases {
		comparePlain(t, in)
	}
}

func comparePlain(t *testing.T, in string) {
	t.Helper()
	if strings.IndexByte(in, '"') >= 0 {
		return
	}
	for _, opt := range []Options{{}, {HUnit: "Oe"}} {
		comma := sniffComma(in)
		d1, e1 := readPlain(in, comma, "x.csv", opt)
		d2, e2 := readQuoted(in, comma, "x.csv", opt)
		if (e1 == nil) != (e2 == nil) || (e1 != nil && e1.Error() != e2.Error()) {
			t.Fatalf("%q: splitter error %v, encoding/csv error %v", in, e1, e2)
		}
		if e1 != nil {
			continue
		}
		if len(d1.T) == 0 && len(d2.T) == 0 {
			d1.T, d2.T = nil, nil
		}
		if !reflect.DeepEqual(d1, d2) {
			t.Fatalf("%q: splitter %+v, encoding/csv %+v", in, d1, d2)
		}
	}
}

// FuzzPlainMatchesCSV: on any input without quotes the splitter and
// encoding/csv agree.
func FuzzPlainMatchesCSV(f *testing.F) {
	for _, c := range plainCases {
		f.Add(c)
	}
	f.Fuzz(func(t *testing.T, in string) { comparePlain(t, in) })
}

// parseDecimal must give exactly strconv.ParseFloat's value (the standard
// library, correctly rounded) wherever it accepts a string.
var decimalCases = []string{"0", "-0", "+1", "1.", ".5", ".", "-", "1e", "1e+", "1.5e-3", "123456789012345678",
	"9007199254740993", "9007199254740992", "0.1", "1e22", "1e23", "1e-22", "1e-23", "000000000000000000001.5",
	"3.0000000000000000001", "12345678901234567.8", "-2.5E+10", "1_0", "0x10", "inf", "nan", "1e9999999999", "4.9e-324"}

func checkDecimal(t *testing.T, s string) {
	v, ok := parseDecimal(s)
	if !ok {
		return
	}
	w, err := strconv.ParseFloat(s, 64)
	if err != nil || math.Float64bits(v) != math.Float64bits(w) {
		t.Fatalf("parseDecimal(%q) = %v (%x); strconv: %v (%x), %v", s, v, math.Float64bits(v), w, math.Float64bits(w), err)
	}
}

func TestParseDecimalMatchesStrconv(t *testing.T) {
	for _, s := range decimalCases {
		checkDecimal(t, s)
	}
	r := rand.New(rand.NewPCG(1, 2))
	for range 200000 {
		v := math.Float64frombits(r.Uint64())
		if math.IsNaN(v) || math.IsInf(v, 0) {
			continue
		}
		for _, prec := range []int{-1, 3, 7, 15, 17} {
			checkDecimal(t, strconv.FormatFloat(v, 'g', prec, 64))
			checkDecimal(t, strconv.FormatFloat(v, 'e', prec, 64))
		}
		checkDecimal(t, strconv.FormatFloat(r.Float64()*2000-1000, 'f', r.IntN(12), 64))
	}
}

func FuzzParseDecimal(f *testing.F) {
	for _, s := range decimalCases {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) { checkDecimal(t, s) })
}
