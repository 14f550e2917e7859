package report

import (
	"bytes"
	"context"
	"fmt"
	"io"
	"math"
	"sort"
	"strings"
	"time"

	"github.com/go-pdf/fpdf"
	"go.yaml.in/yaml/v3"
	"golang.org/x/image/font/gofont/gobold"
	"golang.org/x/image/font/gofont/goregular"

	"hystd/acq/calrec"
	"hystd/acq/config"
	"hystd/acq/engine"
	"hystd/acq/grade"
	"hystd/acq/plot"
	"hystd/acq/record"
	"hystd/calib/loop"
	"hystd/calib/units"
)

// Input is everything a report shows.
type Input struct {
	Run    record.Run
	Loops  []record.Loop // with points (for the plots) and raw samples (for the temperature)
	Events []record.Event
	// Generated is when the report is written; Software the program writing it.
	Generated time.Time
	Software  string
}

// FromStore reads a run with its loops and events, at its latest revision
// (the run with that revision's fixture, specimen and config).
func FromStore(ctx context.Context, r record.Reader, runID string) (Input, error) {
	run, err := r.Run(ctx, runID)
	if err != nil {
		return Input{}, err
	}
	revs, err := r.Revisions(ctx, runID)
	if err != nil {
		return Input{}, err
	}
	in := Input{Run: run.At(revs[len(revs)-1])}
	ls, err := r.Loops(ctx, runID)
	if err != nil {
		return Input{}, err
	}
	for _, l := range ls {
		full, err := r.Loop(ctx, runID, l.N)
		if err != nil {
			return Input{}, err
		}
		in.Loops = append(in.Loops, full)
	}
	if in.Events, err = r.Events(ctx, runID); err != nil {
		return Input{}, err
	}
	return in, nil
}

// snapshot is the fixture and specimen of a run's config snapshot.
type snapshot struct {
	Fixture  config.Fixture
	Specimen config.Specimen
}

// parseSnapshot reads the documents the engine writes into Run.Config
// ("# fixture", "# specimen", "# recipe …"); parts it cannot read stay zero.
func parseSnapshot(cfg string) snapshot {
	var s snapshot
	for _, part := range strings.Split(cfg, "\n---\n") {
		p := strings.TrimPrefix(part, "---\n")
		switch {
		case strings.HasPrefix(p, "# fixture"):
			_ = yaml.Unmarshal([]byte(p), &s.Fixture)
		case strings.HasPrefix(p, "# specimen"):
			_ = yaml.Unmarshal([]byte(p), &s.Specimen)
		}
	}
	return s
}

const (
	font   = "body"
	margin = 18.0
	lineH  = 5.0
)

type doc struct {
	pdf *fpdf.Fpdf
	w   float64 // usable width, mm
}

// Write writes the report of in as a PDF to w.
func Write(w io.Writer, in Input) error {
	pdf := fpdf.New("P", "mm", "A4", "")
	pdf.SetMargins(margin, margin, margin)
	pdf.SetAutoPageBreak(true, 20)
	pdf.AddUTF8FontFromBytes(font, "", goregular.TTF)
	pdf.AddUTF8FontFromBytes(font, "B", gobold.TTF)
	gen := in.Generated
	if gen.IsZero() {
		gen = time.Now()
	}
	pdf.SetCreationDate(gen)
	pdf.SetModificationDate(gen)
	pdf.SetTitle("Test report "+in.Run.ID, true)
	pdf.SetCreator("hystd "+in.Software, true)
	pdf.AliasNbPages("{nb}")
	pdf.SetFooterFunc(func() {
		pdf.SetY(-14)
		pdf.SetFont(font, "", 7.5)
		pdf.SetTextColor(90, 90, 90)
		pdf.CellFormat(0, 4, fmt.Sprintf("run %s · config %s · page %d of {nb}", in.Run.ID, short(in.Run.ConfigHash), pdf.PageNo()), "", 0, "C", false, 0, "")
		pdf.SetTextColor(0, 0, 0)
	})
	d := &doc{pdf: pdf}
	pw, _ := pdf.GetPageSize()
	d.w = pw - 2*margin
	pdf.AddPage()
	d.header(in, gen)
	snap := parseSnapshot(in.Run.Config)
	d.specimen(in.Run, snap.Specimen)
	d.fixture(in, snap.Fixture)
	d.conditions(in)
	for _, l := range in.Loops {
		if err := d.loop(in.Run, snap.Specimen, l); err != nil {
			return err
		}
	}
	d.rules(in.Loops)
	d.cautions(snap.Fixture)
	d.provenance(in, gen)
	d.signatures()
	if err := pdf.Error(); err != nil {
		return fmt.Errorf("report: %w", err)
	}
	return pdf.Output(w)
}

func short(h string) string {
	if len(h) > 16 {
		return h[:16]
	}
	return h
}

func (d *doc) title(s string) {
	p := d.pdf
	if p.GetY() > 250 {
		p.AddPage()
	}
	p.Ln(2)
	p.SetFont(font, "B", 11)
	p.SetFillColor(226, 232, 240)
	p.CellFormat(d.w, 6.5, " "+s, "", 1, "L", true, 0, "")
	p.Ln(1)
	p.SetFont(font, "", 9)
}

// kv writes label/value rows in two columns.
func (d *doc) kv(rows [][2]string) {
	p := d.pdf
	p.SetFont(font, "", 9)
	for _, r := range rows {
		if r[1] == "" {
			r[1] = "—"
		}
		p.SetFont(font, "B", 9)
		p.CellFormat(48, lineH, r[0], "", 0, "L", false, 0, "")
		p.SetFont(font, "", 9)
		p.MultiCell(d.w-48, lineH, r[1], "", "L", false)
	}
}

func (d *doc) header(in Input, gen time.Time) {
	p := d.pdf
	p.SetFont(font, "B", 16)
	p.CellFormat(d.w, 9, "Test report — DC magnetic properties", "", 1, "L", false, 0, "")
	p.SetFont(font, "", 9)
	p.CellFormat(d.w, lineH, fmt.Sprintf("Run %s   ·   %s   ·   report written %s", in.Run.ID, outcomeLine(in.Loops),
		gen.UTC().Format("2006-01-02 15:04 UTC")), "", 1, "L", false, 0, "")
	p.SetDrawColor(40, 40, 40)
	p.Line(margin, p.GetY()+1, margin+d.w, p.GetY()+1)
	p.Ln(3)
}

// outcomeLine summarises the verdicts of all loops.
func outcomeLine(loops []record.Loop) string {
	var all []record.Verdict
	for _, l := range loops {
		all = append(all, l.Verdicts...)
	}
	if len(all) == 0 {
		return "no grade verdicts"
	}
	return "overall verdict: " + strings.ToUpper(string(record.Worst(all)))
}

func (d *doc) specimen(run record.Run, sp config.Specimen) {
	d.title("Specimen")
	id := run.Specimen
	if id == "" {
		id = sp.ID
	}
	g := run.Grade
	if g == "" {
		g = sp.Grade
	}
	rows := [][2]string{{"Specimen", id}, {"Material", run.Material}, {"Grade", g}, {"Class", sp.Class},
		{"Shape and size", geometry(sp)}}
	if sp.MassKg > 0 {
		rows = append(rows, [2]string{"Mass", fmt.Sprintf("%g kg", sp.MassKg)})
	}
	if sp.DensityKgM3 > 0 {
		rows = append(rows, [2]string{"Density", fmt.Sprintf("%g kg/m³", sp.DensityKgM3)})
	}
	if sp.Note != "" {
		rows = append(rows, [2]string{"Note", sp.Note})
	}
	d.kv(rows)
}

func geometry(sp config.Specimen) string {
	switch {
	case sp.Ring != nil:
		r := sp.Ring
		path := "mean path π(D+d)/2 (IEC 60404-4)"
		if r.Path == "effective" {
			path = "effective l_e, A_e (IEC 60205)"
		}
		sf := r.StackingFactor
		if sf == 0 {
			sf = 1
		}
		return fmt.Sprintf("ring, D = %g mm, d = %g mm, h = %g mm, stacking factor %g; %s", r.OuterMM, r.InnerMM, r.HeightMM, sf, path)
	case sp.Epstein != nil:
		return fmt.Sprintf("Epstein square, %d strips of %g m (l_m = 0.94 m, IEC 60404-2)", sp.Epstein.Strips, sp.Epstein.StripLengthM)
	case sp.Strip != nil:
		return fmt.Sprintf("strip, length %g m, path %g m, demagnetizing factor %g", sp.Strip.LengthM, sp.Strip.PathLengthM, sp.Strip.DemagFactor)
	case sp.Direct != nil:
		return fmt.Sprintf("path length %g mm, area %g mm², demagnetizing factor %g", sp.Direct.PathLengthMM, sp.Direct.AreaMM2, sp.Direct.DemagFactor)
	}
	return sp.Shape
}

func (d *doc) fixture(in Input, fx config.Fixture) {
	d.title("Fixture, instruments and calibration")
	hfrom := map[string]string{"current": "from the magnetizing current, H = N1·I/l_m",
		"field_meter": "from the Hall probe beside the specimen, H = B_probe/μ0"}[fx.HFrom]
	rows := [][2]string{{"Fixture", in.Run.Fixture}}
	if fx.Description != "" {
		rows = append(rows, [2]string{"", fx.Description})
	}
	rows = append(rows, [2]string{"Windings", fmt.Sprintf("N1 = %d magnetizing turns, N2 = %d search-coil turns", fx.Winding.N1, fx.Winding.N2)},
		[2]string{"H sensed", hfrom}, [2]string{"B sensed", "electronic integrator on the search coil, B = ψ/(N2·A)"})
	roles := make([]string, 0, len(fx.Instruments))
	for r := range fx.Instruments {
		roles = append(roles, r)
	}
	sort.Strings(roles)
	ids := map[string]string{}
	for _, e := range in.Events {
		if rest, ok := strings.CutPrefix(e.Text, engine.IdentityPrefix); ok {
			if role, id, ok := strings.Cut(rest, ": "); ok {
				ids[role] = id
			}
		}
	}
	for _, r := range roles {
		v := "profile " + fx.Instruments[r].Profile
		if id := ids[r]; id != "" {
			v = id + " (" + v + ")"
		} else {
			v += "; identity not recorded with this run"
		}
		rows = append(rows, [2]string{strings.ReplaceAll(r, "_", " "), v})
	}
	cals := calrec.Listed(in.Events)
	if len(cals) == 0 {
		cals = []string{"no calibration record is stored with this run: the instrument profiles' scale factors were used as configured"}
	}
	for i, c := range cals {
		k := ""
		if i == 0 {
			k = "Calibration"
		}
		rows = append(rows, [2]string{k, c})
	}
	d.kv(rows)
}

func (d *doc) conditions(in Input) {
	d.title("Test conditions")
	r := in.Run
	rows := [][2]string{{"Recipe", r.Recipe}, {"Date", r.Started.UTC().Format("2006-01-02 15:04:05 UTC")},
		{"Operator", r.Operator}, {"Ending", ending(r)}}
	var amps []string
	for _, l := range in.Loops {
		s := fmt.Sprintf("loop %d: %s, ±%s %s", l.N, l.Kind, trim(l.Amplitude), l.AmpUnit)
		if t, ok := temp(l); ok {
			s += fmt.Sprintf(", specimen at %.1f °C", t)
		}
		if rate := sweepRate(l); rate != "" {
			s += ", " + rate
		}
		amps = append(amps, s)
	}
	rows = append(rows, [2]string{"Loops", strings.Join(amps, "\n")})
	d.kv(rows)
}

func ending(r record.Run) string {
	s := string(r.State)
	if !r.Ended.IsZero() && !r.Started.IsZero() {
		s += " after " + r.Ended.Sub(r.Started).Round(10*time.Millisecond).String()
	}
	if r.Reason != "" {
		s += ": " + r.Reason
	}
	return s
}

func trim(x float64) string { return fmt.Sprintf("%.6g", x) }

func temp(l record.Loop) (float64, bool) {
	var s float64
	n := 0
	for _, r := range l.Raw {
		if r.Phase == record.Sweep && !math.IsNaN(r.TempC) {
			s += r.TempC
			n++
		}
	}
	if n == 0 {
		return 0, false
	}
	return s / float64(n), true
}

// sweepRate is the mean |dH/dt| over the loop's points, as swept.
func sweepRate(l record.Loop) string {
	if len(l.Points) < 2 {
		return ""
	}
	var path float64
	for i := 1; i < len(l.Points); i++ {
		path += math.Abs(l.Points[i].H - l.Points[i-1].H)
	}
	dt := (l.Points[len(l.Points)-1].T - l.Points[0].T).Seconds()
	if dt <= 0 || math.IsNaN(path) {
		return ""
	}
	return fmt.Sprintf("mean sweep rate %.3g A/m/s", path/dt)
}

func (d *doc) loop(run record.Run, sp config.Specimen, l record.Loop) error {
	p := d.pdf
	if len(l.Points) > 1 && p.GetY() > 150 {
		p.AddPage() // keep the heading with its plot
	}
	d.title(fmt.Sprintf("Loop %d — %s at ±%s %s", l.N, l.Kind, trim(l.Amplitude), l.AmpUnit))
	magnet := sp.Class == "magnet" || l.Kind == "demag-curve" || l.Kind == "recoil"
	plots := []plot.Options{{Width: 900, Height: 600, Title: fmt.Sprintf("%s — loop %d", run.Specimen, l.N),
		Labels: []string{fmt.Sprintf("loop %d, amplitude %s %s", l.N, trim(l.Amplitude), l.AmpUnit)}}}
	if magnet {
		plots = append(plots, plot.Options{Width: 900, Height: 600, SecondQuadrant: true,
			Title: fmt.Sprintf("%s — loop %d, second quadrant", run.Specimen, l.N), Labels: plots[0].Labels})
	}
	if len(l.Points) > 1 {
		for i, o := range plots {
			var buf bytes.Buffer
			if err := plot.PNG(&buf, []record.Loop{l}, o); err != nil {
				p.MultiCell(d.w, lineH, "plot not drawn: "+err.Error(), "", "L", false)
				continue
			}
			name := fmt.Sprintf("loop-%d-%d", l.N, i)
			p.RegisterImageOptionsReader(name, fpdf.ImageOptions{ImageType: "PNG"}, &buf)
			w := d.w * 0.8
			h := w * 600 / 900
			if p.GetY()+h > 270 {
				p.AddPage()
			}
			p.ImageOptions(name, margin+(d.w-w)/2, p.GetY(), w, h, true, fpdf.ImageOptions{ImageType: "PNG"}, 0, "")
			p.Ln(2)
		}
	}
	// Figures with U rounded (GUM 7.2.6).
	if p.GetY() > 230 {
		p.AddPage()
	}
	p.SetFont(font, "B", 9)
	cols := []float64{38, 26, 22, 14}
	rest := d.w - 100
	for i, h := range []string{"figure", "value", "U (k = 2)", "unit", "how obtained"} {
		w := rest
		if i < len(cols) {
			w = cols[i]
		}
		p.CellFormat(w, lineH+0.5, h, "B", 0, "L", false, 0, "")
	}
	p.Ln(-1)
	p.SetFont(font, "", 8.5)
	for _, f := range l.Figures {
		vs, us := units.Rounded(f.Value, f.U)
		note := clip(strings.ReplaceAll(f.Note, "∮", "∫"), 62)
		p.CellFormat(cols[0], lineH, figName(f.Name), "", 0, "L", false, 0, "")
		p.CellFormat(cols[1], lineH, vs, "", 0, "L", false, 0, "")
		p.CellFormat(cols[2], lineH, us, "", 0, "L", false, 0, "")
		p.CellFormat(cols[3], lineH, f.Unit, "", 0, "L", false, 0, "")
		p.SetFont(font, "", 7)
		p.CellFormat(rest, lineH, note, "", 1, "L", false, 0, "")
		p.SetFont(font, "", 8.5)
	}
	if len(l.Corrections) > 0 {
		p.Ln(1)
		var cs []string
		for _, c := range l.Corrections {
			cs = append(cs, fmt.Sprintf("%s %.3g %s", c.Name, c.Size, c.Unit))
		}
		p.SetFont(font, "B", 8.5)
		p.CellFormat(30, lineH, "Corrections", "", 0, "L", false, 0, "")
		p.SetFont(font, "", 8.5)
		p.MultiCell(d.w-30, lineH, strings.Join(cs, "; "), "", "L", false)
	}
	if len(l.Verdicts) > 0 {
		p.Ln(1)
		v0 := l.Verdicts[0]
		p.SetFont(font, "B", 9)
		p.MultiCell(d.w, lineH, fmt.Sprintf("Verdicts against grade %s, rule %s: %s", v0.Grade, v0.Rule,
			strings.ToUpper(string(record.Worst(l.Verdicts)))), "", "L", false)
		p.SetFont(font, "", 8.5)
		for _, v := range l.Verdicts {
			vs, us := units.Rounded(v.Value, v.U)
			line := fmt.Sprintf("%s = %s ± %s %s, limit %s %s → %s", figName(v.Figure), vs, us, v.Unit, grade.Bounds(v), v.Unit, v.Outcome)
			if v.Note != "" {
				line += "  (" + v.Note + ")"
			}
			p.MultiCell(d.w, lineH, "• "+line, "", "L", false)
		}
	}
	return nil
}

// figName spells the stored figure names as a report reader expects them
// (calib/loop.Defs).
func figName(n string) string {
	if d, ok := loop.DefOf(n); ok {
		return d.Symbol
	}
	return n
}

func (d *doc) rules(loops []record.Loop) {
	seen := map[string]bool{}
	for _, l := range loops {
		for _, v := range l.Verdicts {
			seen[v.Rule] = true
		}
	}
	if len(seen) == 0 {
		return
	}
	d.title("Decision rule")
	names := make([]string, 0, len(seen))
	for n := range seen {
		names = append(names, n)
	}
	sort.Strings(names)
	for _, n := range names {
		d.pdf.MultiCell(d.w, lineH, n+": "+grade.Rules[n]+".", "", "L", false)
	}
	d.pdf.MultiCell(d.w, lineH, "U is the expanded uncertainty with coverage factor k = 2; values and U are rounded for this report "+
		"(U to two significant digits, GUM 7.2.6); the verdicts were decided on the stored, unrounded values.", "", "L", false)
}

func (d *doc) cautions(fx config.Fixture) {
	d.title("Cautions")
	txt := "The magnetizing winding stores ½·L·I²; interrupting its current induces L·dI/dt (kilovolts within a millisecond): " +
		"never open or unplug a winding that carries current, ramp to zero first, keep the freewheel path, the interlocks " +
		"and the emergency stop in place. Windings heat under current. Keep people with pacemakers or implants out of " +
		"static fields above 0.5 mT. Magnets pinch, crush and shatter. Local electrical codes and the laboratory's " +
		"licensed practice take precedence over this report and the program that wrote it."
	if fx.Winding.InductanceH > 0 && fx.Limits.MaxCurrentA > 0 {
		txt = fmt.Sprintf("This fixture's winding (L ≈ %g H, up to %g A) stores up to %.3g J. ", fx.Winding.InductanceH,
			fx.Limits.MaxCurrentA, 0.5*fx.Winding.InductanceH*fx.Limits.MaxCurrentA*fx.Limits.MaxCurrentA) + txt
	}
	d.pdf.MultiCell(d.w, lineH, txt, "", "L", false)
	d.pdf.MultiCell(d.w, lineH, "The results relate only to the specimen tested.", "", "L", false)
}

func (d *doc) provenance(in Input, gen time.Time) {
	d.title("Provenance")
	d.kv([][2]string{{"Measured with", "hystd " + in.Run.Software}, {"Report written by", "hystd " + in.Software},
		{"Config hash (SHA-256)", in.Run.ConfigHash}, {"Run", in.Run.ID}})
}

func (d *doc) signatures() {
	p := d.pdf
	if p.GetY() > 235 {
		p.AddPage()
	}
	d.title("Sign-off")
	p.Ln(8)
	half := (d.w - 10) / 2
	y := p.GetY()
	p.Line(margin, y, margin+half, y)
	p.Line(margin+half+10, y, margin+d.w, y)
	p.SetFont(font, "", 8.5)
	p.CellFormat(half, lineH, "Tested by (name, signature, date)", "", 0, "L", false, 0, "")
	p.SetX(margin + half + 10)
	p.CellFormat(half, lineH, "Approved by (name, signature, date)", "", 1, "L", false, 0, "")
}

// clip shortens s to at most n runes, marking a cut with "…".
func clip(s string, n int) string {
	r := []rune(s)
	if len(r) <= n {
		return s
	}
	return string(r[:n-1]) + "…"
}
