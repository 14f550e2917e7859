package loop

// Def declares one figure once: its stored name (also its field in the
// time-series figure point, its column in exports and the name a grade's
// limit uses), how a reader spells it, its SI unit, which class of material
// reports it, how it is computed, and its key in `hystd analyze` output.
type Def struct {
	Name   string // stored name, e.g. "HcB"
	Label  string // plain-text label of the terminal table, e.g. "loss per cycle"
	Symbol string // as a report reader expects it, e.g. "μa (amplitude)"
	Unit   string // SI unit as stored ("" for ratios)
	// Class is "" for every loop, ClassSoft or ClassMagnet for figures only
	// that class of specimen reports.
	Class string
	// From says what produces the figure: FromLoop (Figures, from one
	// loop), FromCurve (a family of loops: the normal curve) or FromAim (the
	// engine, on a loop aimed at a peak induction).
	From string
	How  string // how it is computed
	// JSON is the key in `hystd analyze --json` (its twin JSON+"_u" holds
	// U); "" when analyze does not print it.
	JSON string
}

// What produces a figure (Def.From).
const (
	FromLoop  = ""
	FromCurve = "curve"
	FromAim   = "aim"
)

// Classes of specimen a figure may be reserved to.
const (
	ClassSoft   = "soft"
	ClassMagnet = "magnet"
)

// Defs are the figures, in the order Figures returns them.
var Defs = []Def{
	{FigHmax, "Hmax", "Hmax", "A/m", "", FromLoop, "tip field, mean of |H| at both tips, from the tip samples themselves", "hmax_a_m"},
	{FigBmax, "Bmax", "Bmax", "T", "", FromLoop, "B at the tips, mean of both", "bmax_t"},
	{FigBr, "Br", "Br", "T", "", FromLoop, "B at H = 0, mean of |B| over the branches", "br_t"},
	{FigHcB, "HcB", "HcB", "A/m", "", FromLoop, "|H| at B = 0, mean over the branches", "hcb_a_m"},
	{FigHcJ, "HcJ", "HcJ", "A/m", "", FromLoop, "|H| at J = B − μ0·H = 0, mean over the branches", "hcj_a_m"},
	{FigMuA, "mu_a", "μa (amplitude)", "", ClassSoft, FromLoop, "amplitude permeability Bmax/(μ0·Hmax)", "mu_a"},
	{FigMuInitial, "mu_initial", "μi (initial)", "", ClassSoft, FromLoop, "B/(μ0·H) on the initial curve at the specimen's low B", ""},
	{FigLossJM3, "loss per cycle", "loss per cycle", "J/m3", "", FromLoop, "∮H dB over one cycle", "loss_j_m3"},
	{FigLossJKg, "loss per cycle, mass", "loss per cycle, mass", "J/kg", "", FromLoop, "∮H dB over one cycle divided by the density", ""},
	{FigBHmax, "(BH)max", "(BH)max", "J/m3", ClassMagnet, FromLoop, "2nd-quadrant maximum of −B·H, exact between samples", "bhmax_j_m3"},
	{FigBHmaxB, "BHmax_B", "BHmax_B", "T", ClassMagnet, FromLoop, "B at the (BH)max point", ""},
	{FigBHmaxH, "BHmax_H", "BHmax_H", "A/m", ClassMagnet, FromLoop, "|H| at the (BH)max point", ""},
	{FigHk, "Hk", "Hk", "A/m", ClassMagnet, FromLoop, "|H| where J = 0.9·Jr in the 2nd quadrant", ""},
	{FigSquareness, "squareness", "squareness", "", ClassMagnet, FromLoop, "Hk/HcJ", ""},
	{FigMuRec, "mu_rec", "μrec (recoil)", "", ClassMagnet, FromLoop, "relative slope dB/dH/μ0 over the recoil range near Br", ""},
	{FigMuMax, "mu_max", "μmax", "", ClassSoft, FromCurve, "largest B/(μ0·H) along the normal curve", ""},
	{FigHMuMax, "H_mu_max", "H_mu_max", "A/m", ClassSoft, FromCurve, "H at μmax on the normal curve", ""},
	// The unit of the drive amplitude is the step's: A, or A/m under
	// closed-loop field control (the stored figure carries which).
	{FigDriveAmplitude, "drive amplitude", "drive amplitude", "A", "", FromAim, "amplitude the peak search settled on, in the step's unit (A, or A/m under field control)", ""},
	{FigPeakTarget, "peak target", "peak target", "T", "", FromAim, "peak B or J the loop was aimed at (the figure's note says which and the tolerance)", ""},
}

// DefOf returns the declaration of a figure.
func DefOf(name string) (Def, bool) {
	for _, d := range Defs {
		if d.Name == name {
			return d, true
		}
	}
	return Def{}, false
}

// Units of the figures, from Defs.
var Units = func() map[string]string {
	m := make(map[string]string, len(Defs))
	for _, d := range Defs {
		m[d.Name] = d.Unit
	}
	return m
}()

// order is the order in which Figures returns figures: Defs from one loop.
var order = func() []string {
	var o []string
	for _, d := range Defs {
		if d.From == FromLoop {
			o = append(o, d.Name)
		}
	}
	return o
}()
