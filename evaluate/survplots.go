package evaluate

import (
	"fmt"
	"image/color"
	"math"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
)

// groupColours are the risk groups' colours, low risk first (Okabe and
// Ito 2008).
var groupColours = []color.Color{colModel, colAll, colReader, color.RGBA{0, 158, 115, 255}}

// kmPlot draws the risk groups' Kaplan–Meier curves with censoring marks
// and the numbers at risk below the axes.
func kmPlot(sv *SurvivalSummary) (func(draw.Canvas), error) {
	p := plot.New()
	title := fmt.Sprintf("Kaplan–Meier by risk group (n = %d, %d events)", sv.N, sv.Events)
	if sv.LogRank != nil {
		title += fmt.Sprintf("; log-rank p %.3g", sv.LogRank.PValue)
	}
	p.Title.Text = title
	p.X.Label.Text = "time (" + unitOr(sv.TimeUnit) + ")"
	p.Y.Label.Text = "event-free proportion"
	p.Add(plotter.NewGrid())
	// The legend goes below the axes, with the numbers at risk: inside the
	// plot it would cover curves that stay high or fall low.
	leg := plot.NewLegend()
	leg.Top, leg.Left = true, true
	tmax := 0.0
	for _, c := range sv.Curves {
		for _, st := range c.Steps {
			tmax = math.Max(tmax, st.Time)
		}
	}
	for g, c := range sv.Curves {
		col := groupColours[g%len(groupColours)]
		line, marks, err := kmLines(c, col)
		if err != nil {
			return nil, err
		}
		p.Add(line)
		if marks != nil {
			p.Add(marks)
		}
		leg.Add(fmt.Sprintf("%d  %s: n %d, %d events", g+1, c.Name, c.N, c.Events), line)
	}
	for _, h := range sv.horizons {
		l, err := plotter.NewLine(plotter.XYs{{X: h, Y: 0}, {X: h, Y: 1}})
		if err == nil {
			l.Color, l.Dashes = colGrey, []vg.Length{vg.Points(3), vg.Points(3)}
			p.Add(l)
		}
	}
	p.X.Min, p.X.Max, p.Y.Min, p.Y.Max = 0, tmax, 0, 1.0
	return func(c draw.Canvas) {
		line := vg.Points(13)
		n := vg.Length(len(sv.Curves))
		top, table, legend := c, c, c
		legend.Max.Y = c.Min.Y + n*line + vg.Millimeter*2
		table.Min.Y, table.Max.Y = legend.Max.Y, legend.Max.Y+(n+1)*line+vg.Millimeter
		top.Min.Y = table.Max.Y + vg.Millimeter*2
		p.Draw(top)
		data := p.DataCanvas(top)
		atRiskTable(table, data, p, sv, tmax)
		legend.Min.X = data.Min.X
		leg.Draw(legend)
	}, nil
}

func unitOr(u string) string {
	if u == "" {
		return "as in the table"
	}
	return u
}

// kmLines is a group's step curve and its censoring marks.
func kmLines(c GroupCurve, col color.Color) (*plotter.Line, *plotter.Scatter, error) {
	xy := plotter.XYs{{X: 0, Y: 1}}
	var cens plotter.XYs
	prev := 1.0
	for _, st := range c.Steps {
		xy = append(xy, plotter.XY{X: st.Time, Y: prev}, plotter.XY{X: st.Time, Y: st.Surv})
		if st.NCensor > 0 {
			cens = append(cens, plotter.XY{X: st.Time, Y: st.Surv})
		}
		prev = st.Surv
	}
	line, err := plotter.NewLine(xy)
	if err != nil {
		return nil, nil, fmt.Errorf("kaplan-meier %s: %w", c.Name, err)
	}
	line.Color, line.Width = col, vg.Points(2)
	if len(cens) == 0 {
		return line, nil, nil
	}
	marks, err := plotter.NewScatter(cens)
	if err != nil {
		return nil, nil, fmt.Errorf("kaplan-meier %s: %w", c.Name, err)
	}
	marks.GlyphStyle = draw.GlyphStyle{Color: col, Radius: vg.Points(3), Shape: draw.PlusGlyph{}}
	return line, marks, nil
}

// atRiskTable prints each group's number at risk at the time axis's major
// ticks, under them.
func atRiskTable(c, data draw.Canvas, p *plot.Plot, sv *SurvivalSummary, tmax float64) {
	tx, _ := p.Transforms(&data)
	sty := p.X.Tick.Label
	sty.XAlign, sty.YAlign = draw.XCenter, draw.YTop
	head := sty
	head.XAlign = draw.XLeft
	line := vg.Points(13)
	y := c.Max.Y
	c.FillText(head, vg.Point{X: c.Min.X + vg.Millimeter, Y: y}, "number at risk")
	for g, cv := range sv.Curves {
		y -= line
		name := head
		name.XAlign = draw.XRight
		name.Color = groupColours[g%len(groupColours)]
		c.FillText(name, vg.Point{X: data.Min.X - vg.Millimeter*4, Y: y}, fmt.Sprintf("%d", g+1))
		for _, tick := range p.X.Tick.Marker.Ticks(0, tmax) {
			if tick.Label == "" {
				continue
			}
			at := tick.Value
			n := 0
			for _, st := range cv.Steps {
				if st.Time >= at {
					n = st.NRisk
					break
				}
			}
			c.FillText(sty, vg.Point{X: tx(at), Y: y}, fmt.Sprintf("%d", n))
		}
	}
}
