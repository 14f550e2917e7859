// Package plausible flags loops whose figures no material can have, which
// almost always means a wrong geometry or number of turns in the config (a
// length in m written for mm, N1 and N2 swapped). A flagged loop is still
// stored: the raw samples are right and can be reprocessed with the
// corrected geometry. Pure numerics, no I/O.
package plausible

import (
	"fmt"
	"math"
)

// Flag starts every finding, so that events and pages can be searched for it.
const Flag = "implausible — check geometry and turns"

// MaxJ is the ceiling of the magnetic polarization J (T): no known material
// exceeds about 2.45 T at saturation (the iron–cobalt alloys near 35 % Co
// are the highest) [trade: common practice, value from memory].
const MaxJ = 2.45

// MaxMuA is the ceiling of the amplitude permeability μa (relative): the
// best nanocrystalline and permalloy-type soft materials stay below about
// 10⁶ [trade, from memory]; 10⁷ leaves a decade of margin.
const MaxMuA = 1e7

// Check returns one finding per ceiling crossed by a loop whose largest
// |J| is jmax (T) and whose amplitude permeability is muA; NaN means not
// known and is not checked. Each finding starts with Flag.
func Check(jmax, muA float64) []string {
	var out []string
	if math.Abs(jmax) > MaxJ {
		out = append(out, fmt.Sprintf("%s: |J| reaches %.4g T, above the %.2f T no known material exceeds", Flag, math.Abs(jmax), MaxJ))
	}
	if muA > MaxMuA {
		out = append(out, fmt.Sprintf("%s: μa = %.3g, above %.0e, more than any known material", Flag, muA, MaxMuA))
	}
	return out
}
