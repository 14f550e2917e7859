package grade

import (
	"math"
	"strconv"
)

// FormatU formats value and its expanded uncertainty u as a result is
// reported: u rounded to two significant digits and the value to the same
// decimal place (GUM, JCGM 100:2008, 7.2.6). Full precision stays in the
// store; this is for terminals and reports. Without a usable u the value is
// given to 5 significant digits and u as "—".
func FormatU(value, u float64) (string, string) {
	if math.IsNaN(value) || math.IsInf(value, 0) {
		return "—", "—"
	}
	if math.IsNaN(u) || math.IsInf(u, 0) || u <= 0 {
		return strconv.FormatFloat(value, 'g', 5, 64), "—"
	}
	dec := 1 - int(math.Floor(math.Log10(u)))
	ur := roundTo(u, dec)
	if d2 := 1 - int(math.Floor(math.Log10(ur))); d2 != dec { // 9.96 → 10: one digit fewer
		dec = d2
		ur = roundTo(u, dec)
	}
	vr := roundTo(value, dec)
	if dec < 0 {
		dec = 0
	}
	return strconv.FormatFloat(vr, 'f', dec, 64), strconv.FormatFloat(ur, 'f', dec, 64)
}

func roundTo(x float64, dec int) float64 {
	p := math.Pow(10, float64(dec))
	r := math.Round(x*p) / p
	if dec < 0 {
		r = math.Round(x/math.Pow(10, float64(-dec))) * math.Pow(10, float64(-dec))
	}
	return r
}
