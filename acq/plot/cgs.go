package plot

import "math"

// Display factors from SI to CGS (NBS SP 696 "Units for magnetic
// properties"; NIST SP 811 App. B): 1 Oe = 10³/(4π) A/m, 1 G = 1e-4 T,
// 1 MGOe = 10⁵/(4π) J/m³ (≈ 7957.747 J/m³). They belong in calib/units; they
// stay here only until that package exports its CGS conversions.
const (
	oerstedPerAm           = 4 * math.Pi / 1e3
	gaussPerTesla          = 1e4
	megaGaussOerstedPerJm3 = 4 * math.Pi / 1e5
)
