// Package units holds the typed SI quantities used throughout hystd and the one
// definition of the magnetic constant.
//
// Every quantity is a float64 in its coherent SI unit. Conversions to and from
// CGS units live here too, so that no other package multiplies by 4π.
package units

// Mu0 is the vacuum magnetic permeability μ0 in N/A² (= H/m), CODATA 2018
// recommended value 1.256 637 062 12(19)e-6. Since the 2019 SI revision μ0 is
// measured, not exactly 4π·1e-7; this is the one place it is named.
const Mu0 = 1.25663706212e-6

// Mu0RelUncertainty is the relative standard uncertainty of Mu0 (CODATA 2018).
const Mu0RelUncertainty = 1.5e-10

// Ampere is an electric current in A.
type Ampere float64

// Volt is an electric potential difference in V.
type Volt float64

// AmperePerMetre is a magnetic field strength H in A/m.
type AmperePerMetre float64

// Tesla is a magnetic flux density B or a polarization J in T.
type Tesla float64

// WeberTurn is a flux linkage ψ = ∫V dt in Wb-turns (= V·s), what an
// electronic integrator returns.
type WeberTurn float64

// Metre is a length in m.
type Metre float64

// SquareMetre is an area in m².
type SquareMetre float64

// Kilogram is a mass in kg.
type Kilogram float64

// KilogramPerCubicMetre is a density in kg/m³.
type KilogramPerCubicMetre float64

// JoulePerCubicMetre is an energy density in J/m³: loss per cycle, (BH)max.
type JoulePerCubicMetre float64

// Celsius is a temperature in °C.
type Celsius float64

// AmperePerSecond is a current slew rate in A/s.
type AmperePerSecond float64
