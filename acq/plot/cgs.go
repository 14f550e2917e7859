package plot

import "hystd/calib/units"

// Display factors from SI to CGS, from the one definition in calib/units.
const (
	oerstedPerAm           = 1 / units.AmperePerMetrePerOersted
	gaussPerTesla          = 1 / units.TeslaPerGauss
	megaGaussOerstedPerJm3 = 1 / units.JoulePerCubicMetrePerMGOe
)

// CGSFactors returns the multipliers that turn A/m into Oe, T into G and
// J/m³ into MGOe, for clients (the review page) that draw CGS axes.
func CGSFactors() (oePerAm, gPerT, mgoePerJm3 float64) {
	return oerstedPerAm, gaussPerTesla, megaGaussOerstedPerJm3
}
