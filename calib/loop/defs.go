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
	// Curve marks figures built from a family of loops (the normal curve),
	// not returned by Figures.
	Curve bool
	How   string // how it is computed
	// JSON is the key in `hystd analyze --json` (its twin JSON+"_u" holds
	// U); "" when analyze does not print it.
	JSON string
}

// Classes of specimen a figure may be reserved to.
const (
	ClassSoft   = "soft"
	ClassMagnet = "magnet"
)

// Defs are the figures, in the order Figures returns them.
var Defs = []Def{
	{FigHmax, "Hmax", "Hmax", "A/m", "", false, "tip field, mean of |H| at both tips, from the tip samples themselves", "hmax_a_m"},
	{FigBmax, "Bmax", "Bmax", "T", "", false, "B at the tips, mean of both", "bmax_t"},
	{FigBr, "Br", "Br", "T", "", false, "B at H = 0, mean of |B| over the branches", "br_t"},
	{FigHcB, "HcB", "HcB", "A/m", "", false, "|H| at B = 0, mean over the branches", "hcb_a_m"},
	{FigHcJ, "HcJ", "HcJ", "A/m", "", false, "|H| at J = B − μ0·H = 0, mean over the branches", "hcj_a_m"},
	{FigMuA, "mu_a", "μa (amplitude)", "", ClassSoft, false, "amplitude permeability Bmax/(μ0·Hmax)", "mu_a"},
	{FigMuInitial, "mu_initial", "μi (initial)", "", ClassSoft, false, "B/(μ0·H) on the initial curve at the specimen's low B", ""},
	{FigLossJM3, "loss per cycle", "loss per cycle", "J/m3", "", false, "∮H dB over one cycle", "loss_j_m3"},
	{FigLossJKg, "loss per cycle, mass", "loss per cycle, mass", "J/kg", "", false, "∮H dB over one cycle divided by the density", ""},
	{FigBHmax, "(BH)max", "(BH)max", "J/m3", ClassMagnet, false, "2nd-quadrant maximum of −B·H, exact between samples", "bhmax_j_m3"},
	{FigBHmaxB, "BHmax_B", "BHmax_B", "T", ClassMagnet, false, "B at the (BH)max point", ""},
	{FigBHmaxH, "BHmax_H", "BHmax_H", "A/m", ClassMagnet, false, "|H| at the (BH)max point", ""},
	{FigHk, "Hk", "Hk", "A/m", ClassMagnet, false, "|H| where J = 0.9·Jr in the 2nd quadrant", ""},
	{FigSquareness, "squareness", "squareness", "", ClassMagnet, false, "Hk/HcJ", ""},
	{FigMuRec, "mu_rec", "μrec (recoil)", "", ClassMagnet, false, "relative slope dB/dH/μ0 over the recoil range near Br", ""},
	{FigMuMax, "mu_max", "μmax", "", ClassSoft, true, "largest B/(μ0·H) along the normal curve", ""},
	{FigHMuMax, "H_mu_max", "H_mu_max", "A/m", ClassSoft, true, "H at μmax on the normal curve", ""},
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

// order is the order in which Figures returns figures: Defs not built from
// a family of loops.
var order = func() []string {
	var o []string
	for _, d := range Defs {
		if !d.Curve {
			o = append(o, d.Name)
		}
	}
	return o
}()
