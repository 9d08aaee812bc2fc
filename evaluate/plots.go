package evaluate

import (
	"bytes"
	"fmt"
	"image/color"
	"math"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgimg"
)

// Colours of the report's plots (Okabe and Ito 2008 colour-blind-safe set).
var (
	colModel  = color.RGBA{0, 114, 178, 255}   // blue
	colBand   = color.NRGBA{86, 180, 233, 110} // sky blue, translucent
	colReader = color.RGBA{213, 94, 0, 255}    // vermillion
	colAll    = color.RGBA{230, 159, 0, 255}   // orange
	colGrey   = color.RGBA{120, 120, 120, 255} // reference lines
	colPos    = color.NRGBA{213, 94, 0, 120}
	colNeg    = color.NRGBA{0, 114, 178, 120}
)

// Plot is one rendered PNG of the report.
type Plot struct {
	Name    string // file name, e.g. "roc.png"
	Caption string
	PNG     []byte
}

// Plots renders the report's PNGs: the ROC curve with its band, operating
// point and reader, the reliability diagram over the score histogram (when
// the score is a probability), the confusion matrices and the decision
// curve (when the score is a probability).
func Plots(s *Summary) ([]Plot, error) {
	var out []Plot
	add := func(name, caption string, w, h vg.Length, draws ...func(draw.Canvas)) error {
		b, err := render(w, h, draws...)
		if err != nil {
			return fmt.Errorf("plot %s: %w", name, err)
		}
		out = append(out, Plot{Name: name, Caption: caption, PNG: b})
		return nil
	}
	if s.Survival != nil {
		km, err := kmPlot(s.Survival)
		if err != nil {
			return nil, err
		}
		if err := add("km.png", "Kaplan–Meier curves by risk group ("+s.Survival.Groups+"); + marks a censored case; dashed lines are the horizons; numbers at risk below.",
			6*vg.Inch, 5*vg.Inch, km); err != nil {
			return nil, err
		}
	}
	if s.ROC == nil {
		return out, nil
	}
	roc, err := rocPlot(s)
	if err != nil {
		return nil, err
	}
	if err := add("roc.png", "ROC curve; shaded: "+s.ROCBand.Method+".", 5*vg.Inch, 5*vg.Inch, roc.Draw); err != nil {
		return nil, err
	}
	if s.Calibration != nil {
		rel, hist := reliabilityPlots(s)
		if err := add("calibration.png", "Reliability diagram ("+s.Calibration.ECEMethod+") over the score histogram by class.",
			5*vg.Inch, 6*vg.Inch, stacked(rel, hist)); err != nil {
			return nil, err
		}
	}
	mats := []*plot.Plot{confusionPlot("Model (score ≥ "+fmt.Sprintf("%.3g", s.OperatingPoint.Threshold)+")", s.OperatingPoint.Confusion)}
	if s.Reader != nil {
		mats = append(mats, confusionPlot("Reader ("+s.Reader.Column+")", s.Reader.Confusion))
	}
	if err := add("confusion.png", "Confusion matrices: rows are the truth, columns the call.",
		vg.Length(len(mats))*3.6*vg.Inch, 3.4*vg.Inch, sideBySide(mats...)); err != nil {
		return nil, err
	}
	if s.DecisionCurve != nil {
		dc, err := decisionPlot(s)
		if err != nil {
			return nil, err
		}
		if err := add("decision.png", "Decision curve (Vickers and Elkin 2006): net benefit by threshold probability. The model's curve is shown whole; treat-all continues below the lower edge as the threshold rises.",
			6*vg.Inch, 4.5*vg.Inch, dc.Draw); err != nil {
			return nil, err
		}
	}
	return out, nil
}

func render(w, h vg.Length, draws ...func(draw.Canvas)) ([]byte, error) {
	img := vgimg.NewWith(vgimg.UseWH(w, h), vgimg.UseDPI(96), vgimg.UseBackgroundColor(color.White))
	dc := draw.New(img)
	for _, d := range draws {
		d(dc)
	}
	var b bytes.Buffer
	if _, err := (vgimg.PngCanvas{Canvas: img}).WriteTo(&b); err != nil {
		return nil, err
	}
	return b.Bytes(), nil
}

func stacked(top, bottom *plot.Plot) func(draw.Canvas) {
	return func(c draw.Canvas) {
		h := c.Max.Y - c.Min.Y
		split := c.Min.Y + h*0.36
		b, t := c, c
		b.Max.Y = split
		t.Min.Y = split
		top.Draw(t)
		bottom.Draw(b)
	}
}

func sideBySide(ps ...*plot.Plot) func(draw.Canvas) {
	return func(c draw.Canvas) {
		tiles := draw.Tiles{Rows: 1, Cols: len(ps), PadX: vg.Millimeter * 6, PadLeft: vg.Millimeter * 2,
			PadRight: vg.Millimeter * 2, PadTop: vg.Millimeter * 2, PadBottom: vg.Millimeter * 2}
		for i, p := range ps {
			p.Draw(tiles.At(c, i, 0))
		}
	}
}

func unitAxes(p *plot.Plot) {
	p.X.Min, p.X.Max, p.Y.Min, p.Y.Max = 0, 1, 0, 1
	p.Add(plotter.NewGrid())
}

func diagonal() *plotter.Line {
	l, _ := plotter.NewLine(plotter.XYs{{X: 0, Y: 0}, {X: 1, Y: 1}}) // two finite points cannot fail
	l.Color = colGrey
	l.Dashes = []vg.Length{vg.Points(4), vg.Points(3)}
	return l
}

func rocPlot(s *Summary) (*plot.Plot, error) {
	p := plot.New()
	p.Title.Text = fmt.Sprintf("ROC (n = %d, %d positive): AUC %.3f (95%% CI %.3f to %.3f)", s.N, s.NPositive, s.AUC.Value, s.AUC.CI95[0], s.AUC.CI95[1])
	p.X.Label.Text = "1 − specificity (false positive rate)"
	p.Y.Label.Text = "sensitivity (true positive rate)"
	unitAxes(p)
	var band plotter.XYs
	for i := range s.ROCBand.FPR {
		band = append(band, plotter.XY{X: s.ROCBand.FPR[i], Y: s.ROCBand.Hi[i]})
	}
	for i := len(s.ROCBand.FPR) - 1; i >= 0; i-- {
		band = append(band, plotter.XY{X: s.ROCBand.FPR[i], Y: s.ROCBand.Lo[i]})
	}
	poly, err := plotter.NewPolygon(band)
	if err != nil {
		return nil, fmt.Errorf("roc band: %w", err)
	}
	poly.Color = colBand
	poly.LineStyle.Width = 0
	curve := make(plotter.XYs, len(s.ROC))
	for i, pt := range s.ROC {
		curve[i] = plotter.XY{X: pt.FPR, Y: pt.TPR}
	}
	line, err := plotter.NewLine(curve)
	if err != nil {
		return nil, fmt.Errorf("roc curve: %w", err)
	}
	line.Color, line.Width = colModel, vg.Points(2)
	p.Add(poly, diagonal(), line)
	p.Legend.Add("95% band", poly)
	p.Legend.Add(fmt.Sprintf("%s (AUC %.3f)", s.Score, s.AUC.Value), line)
	if c := s.Compare; c != nil {
		xy := make(plotter.XYs, len(c.ROC))
		for i, pt := range c.ROC {
			xy[i] = plotter.XY{X: pt.FPR, Y: pt.TPR}
		}
		cl, err := plotter.NewLine(xy)
		if err != nil {
			return nil, fmt.Errorf("roc of %s: %w", c.Column, err)
		}
		cl.Color, cl.Width = colAll, vg.Points(1.5)
		cl.Dashes = []vg.Length{vg.Points(6), vg.Points(2)}
		p.Add(cl)
		p.Legend.Add(fmt.Sprintf("%s (AUC %.3f)", c.Column, c.AUC.Value), cl)
	}
	op := s.OperatingPoint
	model, _ := plotter.NewScatter(plotter.XYs{{X: 1 - op.Specificity.Value, Y: op.Sensitivity.Value}}) // one finite point
	model.GlyphStyle = draw.GlyphStyle{Color: colModel, Radius: vg.Points(5), Shape: draw.CircleGlyph{}}
	p.Add(model)
	p.Legend.Add(fmt.Sprintf("model at %.3g (%s)", op.Threshold, op.Rule), model)
	if r := s.Reader; r != nil {
		rd, _ := plotter.NewScatter(plotter.XYs{{X: 1 - r.Specificity.Value, Y: r.Sensitivity.Value}})
		rd.GlyphStyle = draw.GlyphStyle{Color: colReader, Radius: vg.Points(6), Shape: draw.PyramidGlyph{}}
		p.Add(rd)
		p.Legend.Add("reader ("+r.Column+")", rd)
	}
	p.Legend.Left, p.Legend.Top = false, false
	p.Legend.XOffs, p.Legend.YOffs = -vg.Millimeter*2, vg.Millimeter*2
	return p, nil
}

func reliabilityPlots(s *Summary) (rel, hist *plot.Plot) {
	rel = plot.New()
	rel.Title.Text = fmt.Sprintf("Reliability (n = %d): Brier %.3f, ECE %.3f", s.N, s.Calibration.Brier, s.Calibration.ECE)
	rel.X.Label.Text = "mean predicted probability in bin"
	rel.Y.Label.Text = "observed event rate"
	unitAxes(rel)
	var pts plotter.XYs
	for _, b := range s.Calibration.Bins {
		if b.N > 0 {
			pts = append(pts, plotter.XY{X: b.MeanProb, Y: b.EventRate})
		}
	}
	rel.Add(diagonal())
	if l, err := plotter.NewLine(pts); err == nil {
		l.Color = colModel
		rel.Add(l)
	}
	if sc, err := plotter.NewScatter(pts); err == nil {
		sc.GlyphStyle = draw.GlyphStyle{Color: colModel, Radius: vg.Points(4), Shape: draw.CircleGlyph{}}
		rel.Add(sc)
		rel.Legend.Add("bins with cases", sc)
	}
	rel.Legend.Top = true
	rel.Legend.Left = true
	rel.Legend.XOffs = vg.Millimeter * 2

	hist = plot.New()
	hist.X.Label.Text = "score"
	hist.Y.Label.Text = "cases"
	hist.X.Min, hist.X.Max = 0, 1
	posBins, negBins := classBins(s)
	for _, h := range []struct {
		bins []plotter.HistogramBin
		col  color.Color
		name string
	}{{negBins, colNeg, "label " + s.NegativeLabel}, {posBins, colPos, "label " + s.PositiveLabel}} {
		hp := &plotter.Histogram{Bins: h.bins, Width: 1.0 / ECEBins, FillColor: h.col, LineStyle: draw.LineStyle{Color: h.col, Width: vg.Points(0.5)}}
		hist.Add(hp)
		hist.Legend.Add(h.name, hp)
	}
	// Headroom above the tallest bar keeps the legend off the bars.
	tallest := 0.0
	for i := range posBins {
		tallest = math.Max(tallest, math.Max(posBins[i].Weight, negBins[i].Weight))
	}
	hist.Y.Min, hist.Y.Max = 0, math.Max(1, tallest)*1.6
	hist.Legend.Top = true
	hist.Legend.Left = false
	return rel, hist
}

// classBins counts positives and negatives per reliability bin from the
// summary's ROC points (each holds the cumulative counts at its score).
func classBins(s *Summary) (pos, neg []plotter.HistogramBin) {
	pos = make([]plotter.HistogramBin, ECEBins)
	neg = make([]plotter.HistogramBin, ECEBins)
	for i := range pos {
		lo, hi := float64(i)/ECEBins, float64(i+1)/ECEBins
		pos[i] = plotter.HistogramBin{Min: lo, Max: hi}
		neg[i] = plotter.HistogramBin{Min: lo, Max: hi}
	}
	npos, nneg := float64(s.NPositive), float64(s.N-s.NPositive)
	for i := 1; i < len(s.ROC); i++ {
		k := min(int(s.ROC[i].Threshold*ECEBins), ECEBins-1)
		pos[k].Weight += (s.ROC[i].TPR - s.ROC[i-1].TPR) * npos
		neg[k].Weight += (s.ROC[i].FPR - s.ROC[i-1].FPR) * nneg
	}
	return pos, neg
}

// confusionCells draws a 2×2 confusion matrix in data coordinates
// [-0.5, 1.5]², shading each cell by its share of its true class.
type confusionCells struct{ c Confusion }

// Plot draws the cells and their counts.
func (cc confusionCells) Plot(c draw.Canvas, p *plot.Plot) {
	tx, ty := p.Transforms(&c)
	cells := []struct {
		x, y  float64
		n, of int
		name  string
	}{
		{0, 1, cc.c.TP, cc.c.TP + cc.c.FN, "TP"}, {1, 1, cc.c.FN, cc.c.TP + cc.c.FN, "FN"},
		{0, 0, cc.c.FP, cc.c.FP + cc.c.TN, "FP"}, {1, 0, cc.c.TN, cc.c.FP + cc.c.TN, "TN"},
	}
	sty := p.Title.TextStyle
	sty.XAlign, sty.YAlign = draw.XCenter, draw.YCenter
	sty.Font.Size = vg.Points(14)
	for _, cell := range cells {
		share := 0.0
		if cell.of > 0 {
			share = float64(cell.n) / float64(cell.of)
		}
		correct := cell.name == "TP" || cell.name == "TN"
		base := colReader
		if correct {
			base = colModel
		}
		fill := color.NRGBA{base.R, base.G, base.B, uint8(40 + 180*share)}
		x0, x1 := tx(cell.x-0.5), tx(cell.x+0.5)
		y0, y1 := ty(cell.y-0.5), ty(cell.y+0.5)
		c.FillPolygon(fill, []vg.Point{{X: x0, Y: y0}, {X: x1, Y: y0}, {X: x1, Y: y1}, {X: x0, Y: y1}})
		c.FillText(sty, vg.Point{X: tx(cell.x), Y: ty(cell.y)}, fmt.Sprintf("%s %d", cell.name, cell.n))
	}
}

func confusionPlot(title string, c Confusion) *plot.Plot {
	p := plot.New()
	p.Title.Text = title
	p.Add(confusionCells{c})
	p.X.Min, p.X.Max, p.Y.Min, p.Y.Max = -0.5, 1.5, -0.5, 1.5
	p.NominalX("called positive", "called negative")
	p.NominalY("truly negative", "truly positive")
	p.X.Min, p.X.Max, p.Y.Min, p.Y.Max = -0.5, 1.5, -0.5, 1.5
	return p
}

func decisionPlot(s *Summary) (*plot.Plot, error) {
	p := plot.New()
	p.Title.Text = fmt.Sprintf("Decision curve (n = %d, prevalence %.3f)", s.N, s.Prevalence)
	p.X.Label.Text = "threshold probability"
	p.Y.Label.Text = "net benefit"
	p.Add(plotter.NewGrid())
	var model, all, none plotter.XYs
	for _, pt := range s.DecisionCurve {
		model = append(model, plotter.XY{X: pt.Threshold, Y: pt.Model})
		all = append(all, plotter.XY{X: pt.Threshold, Y: pt.TreatAll})
		none = append(none, plotter.XY{X: pt.Threshold, Y: pt.TreatNone})
	}
	for _, l := range []struct {
		xy   plotter.XYs
		col  color.Color
		name string
		w    vg.Length
	}{{none, colGrey, "treat none", 1}, {all, colAll, "treat all", 1.5}, {model, colModel, s.Score, 2}} {
		line, err := plotter.NewLine(l.xy)
		if err != nil {
			return nil, fmt.Errorf("decision curve: %w", err)
		}
		line.Color, line.Width = l.col, vg.Points(float64(l.w))
		p.Add(line)
		p.Legend.Add(l.name, line)
	}
	// The model's curve is shown whole. Treat-all falls without bound as
	// the threshold rises (to −98·(1 − prevalence) at 0.99), so it leaves
	// the plot below the model's lowest value; the caption says so.
	low := -0.05
	for _, pt := range s.DecisionCurve {
		low = math.Min(low, pt.Model)
	}
	p.X.Min, p.X.Max = 0, 1
	p.Y.Min, p.Y.Max = low-0.02, s.Prevalence*1.35+0.05
	p.Legend.Top = true
	return p, nil
}
