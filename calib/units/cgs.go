package units

import "math"

// CGS conversions (NBS SP 696 "Units for magnetic properties"; NIST SP 811
// App. B). The factor 4π below is the rationalization factor of the Gaussian
// system, exact by definition; it is not μ0.
const (
	// AmperePerMetrePerOersted: 1 Oe = 10³/(4π) A/m ≈ 79.577 4715 A/m.
	AmperePerMetrePerOersted = 1e3 / (4 * math.Pi)
	// TeslaPerGauss: 1 G = 1e-4 T.
	TeslaPerGauss = 1e-4
	// AmperePerMetrePerEmuCm3: a magnetization of 1 emu/cm³ = 10³ A/m.
	AmperePerMetrePerEmuCm3 = 1e3
	// JoulePerCubicMetrePerErgCm3: 1 erg/cm³ = 0.1 J/m³.
	JoulePerCubicMetrePerErgCm3 = 0.1
	// JoulePerCubicMetrePerMGOe: 1 MGOe = 1e6 G·Oe = 10⁵/(4π) J/m³ ≈ 7957.747 J/m³.
	JoulePerCubicMetrePerMGOe = 1e6 * TeslaPerGauss * AmperePerMetrePerOersted
)

// FromOersted converts a field strength in Oe to A/m.
func FromOersted(oe float64) AmperePerMetre { return AmperePerMetre(oe * AmperePerMetrePerOersted) }

// Oersted returns the field strength in Oe.
func (v AmperePerMetre) Oersted() float64 { return float64(v) / AmperePerMetrePerOersted }

// FromEmuPerCm3 converts a magnetization in emu/cm³ to A/m.
func FromEmuPerCm3(m float64) AmperePerMetre { return AmperePerMetre(m * AmperePerMetrePerEmuCm3) }

// EmuPerCm3 returns a magnetization in emu/cm³.
func (v AmperePerMetre) EmuPerCm3() float64 { return float64(v) / AmperePerMetrePerEmuCm3 }

// FromGauss converts a flux density in G to T.
func FromGauss(g float64) Tesla { return Tesla(g * TeslaPerGauss) }

// Gauss returns the flux density in G.
func (v Tesla) Gauss() float64 { return float64(v) / TeslaPerGauss }

// FromErgPerCm3 converts an energy density in erg/cm³ to J/m³.
func FromErgPerCm3(e float64) JoulePerCubicMetre {
	return JoulePerCubicMetre(e * JoulePerCubicMetrePerErgCm3)
}

// ErgPerCm3 returns the energy density in erg/cm³.
func (v JoulePerCubicMetre) ErgPerCm3() float64 { return float64(v) / JoulePerCubicMetrePerErgCm3 }

// FromMGOe converts an energy product in MGOe to J/m³.
func FromMGOe(e float64) JoulePerCubicMetre { return JoulePerCubicMetre(e * JoulePerCubicMetrePerMGOe) }

// MGOe returns the energy product in MGOe.
func (v JoulePerCubicMetre) MGOe() float64 { return float64(v) / JoulePerCubicMetrePerMGOe }

// Polarization returns J = B − μ0·H in T.
func Polarization(b Tesla, h AmperePerMetre) Tesla { return b - Tesla(Mu0*float64(h)) }
