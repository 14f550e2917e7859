package recipe

import (
	"math"
	"strings"
)

// RecordLoop records Cycles symmetric loops of ±Amplitude, each stored.
// With Peak, Amplitude is the first try of a search for the amplitude that
// gives the loop the stated peak induction (see Peak).
type RecordLoop struct {
	Amplitude Level `yaml:"amplitude"`
	Rate      Rate  `yaml:"rate"`
	Cycles    int   `yaml:"cycles"` // recorded loops, default 1
	Peak      *Peak `yaml:"peak"`
	Sampling  `yaml:",inline"`
}

// Peak aims a recorded loop at a peak induction B or polarization J (soft
// materials are quoted at a stated peak, e.g. 1.0 or 1.5 T, common
// practice). Before recording, the engine tries loops at amplitudes chosen
// by secant steps on the measured tip against the amplitude, at most Tries,
// never above the fixture's max current, until the tip is within Tolerance
// of the target; it then conditions at that amplitude and records.
type Peak struct {
	B         *Induction `yaml:"b"`         // target peak B; or
	J         *Induction `yaml:"j"`         // target peak J = B − μ0·H
	Tolerance Induction  `yaml:"tolerance"` // default 1 % of the target
	Tries     int        `yaml:"tries"`     // default 8
}

func (d *RecordLoop) check(c *stepCheck, p string) {
	c.amplitude(p+".amplitude", d.Amplitude)
	c.rate(p+".rate", d.Rate)
	c.cycles(p+".cycles", &d.Cycles, 1, 100)
	c.sampling(p, &d.Sampling)
	if d.Peak != nil {
		c.peak(p+".peak", d.Peak)
	}
}

// MaxPeak bounds a peak target: above every material's saturation
// polarization (about 2.4 T for iron–cobalt, handbook value from memory).
const MaxPeak = 5.0

// MaxTries bounds the tries of a peak search.
const MaxTries = 20

// peak checks a peak target and fills its defaults.
func (c *checker) peak(p string, k *Peak) {
	var target *Induction
	switch {
	case k.B != nil && k.J != nil:
		c.add(p, "give b or j (the peak to aim at), not both")
		return
	case k.B != nil:
		target = k.B
		p += ".b"
	case k.J != nil:
		target = k.J
		p += ".j"
	default:
		c.add(p, "required: b or j, the peak induction to aim at, e.g. \"b: 1.5 T\"")
		return
	}
	if !(*target > 0) || *target > MaxPeak {
		c.add(p, "must be above 0 T and at most %g T, got %s", MaxPeak, *target)
		return
	}
	tp := strings.TrimSuffix(strings.TrimSuffix(p, ".b"), ".j")
	if k.Tolerance == 0 {
		k.Tolerance = *target / 100
	}
	if !(k.Tolerance > 0) || k.Tolerance > *target/10 {
		c.add(tp+".tolerance", "must be above 0 T and at most a tenth of the target (%s), got %s", *target/10, k.Tolerance)
	}
	if k.Tries == 0 {
		k.Tries = 8
	}
	if k.Tries < 1 || k.Tries > MaxTries {
		c.add(tp+".tries", "must be 1–%d, got %d", MaxTries, k.Tries)
	}
}

func (d *RecordLoop) expand(x *expander, src string) {
	for range d.Cycles {
		if d.Peak == nil {
			x.loop(src, src+".amplitude", LoopKindLoop, d.Amplitude, x.rt(d.Rate), d.Sampling)
			continue
		}
		if !x.aimedLoop(src, d) {
			return
		}
	}
}

// aimedLoop expands one loop aimed at a peak; false when its first try is
// already above the fixture's max current (refused).
func (x *expander) aimedLoop(src string, d *RecordLoop) bool {
	a := x.lv(d.Amplitude)
	aim := &Aim{Of: "B", Tolerance: float64(d.Peak.Tolerance), Tries: d.Peak.Tries, First: a, Max: math.NaN(), perRecipe: x.conv}
	if d.Peak.B != nil {
		aim.Target = float64(*d.Peak.B)
	} else {
		aim.Of, aim.Target = "J", float64(*d.Peak.J)
	}
	if m := x.fx.Limits.MaxCurrentA; m > 0 && x.toAmp > 0 {
		aim.Max = m / x.toAmp
		if a > aim.Max {
			x.c.add(src+".amplitude", "the first try %s is above the fixture limit limits.max_current_a = %g A of %q", d.Amplitude, m, x.fx.Name)
			return false
		}
	}
	info := LoopInfo{Kind: LoopKindLoop, Amplitude: d.Amplitude.Value, AmpUnit: d.Amplitude.Unit}
	x.recordedAim(src, src+".peak", info, x.rt(d.Rate), d.Sampling, aim, a, -a, a)
	return true
}

func (d *RecordLoop) unit() (string, bool) { return d.Amplitude.Unit, true }
