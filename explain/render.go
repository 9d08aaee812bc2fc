package explain

import (
	"bytes"
	"errors"
	"fmt"
	"image"
	"image/color"
	"image/draw"
	"image/png"
	"math"
	"strings"

	"golang.org/x/image/font"
	"golang.org/x/image/font/basicfont"
	"golang.org/x/image/math/fixed"

	"github.com/midsag/midsag"
)

// Layout of the picture, in display pixels.
const (
	displaySide = 512 // the input is scaled up to about this side
	legendWidth = 150
	margin      = 10
	lineHeight  = 15 // basicfont.Face7x13 is 13 px high; 2 px leading
	charWidth   = 7
	overlayA    = 0.55 // opacity of the map over the slice
)

// Picture draws an explained result: the centre slice as the model saw it
// in grey, the occlusion map over it in viridis (van der Walt and Smith
// 2015) where occluding lowered the calibrated probability, a legend bar
// with its scale, and the research-use notice. res must come from a
// Pipeline run with an Explainer (its Explanation.Picture set).
func Picture(res *midsag.Result) (*image.RGBA, error) {
	if res == nil || res.Explanation == nil || res.Explanation.Picture == nil || res.Explanation.Picture.Underlay == nil {
		return nil, errors.New("explain: the result has no explanation picture")
	}
	e := res.Explanation
	u := e.Picture.Underlay
	if len(e.Picture.Map) != u.Rows*u.Columns {
		return nil, fmt.Errorf("explain: map has %d values for a %dx%d slice", len(e.Picture.Map), u.Rows, u.Columns)
	}
	scale := max(1, displaySide/max(u.Rows, u.Columns))
	iw, ih := u.Columns*scale, u.Rows*scale
	width := margin + iw + margin + legendWidth
	notice := wrap(midsag.Notice, (width-2*margin)/charWidth)
	height := margin + lineHeight + ih + margin + lineHeight*len(notice) + margin
	img := image.NewRGBA(image.Rect(0, 0, width, height))
	draw.Draw(img, img.Bounds(), image.NewUniform(color.RGBA{A: 255}), image.Point{}, draw.Src)

	lo, hi := float32(math.Inf(1)), float32(math.Inf(-1))
	for _, v := range u.Pix {
		lo, hi = min(lo, v), max(hi, v)
	}
	if hi <= lo {
		hi = lo + 1
	}
	vmax := 0.0
	for _, v := range e.Picture.Map {
		vmax = math.Max(vmax, v)
	}
	top := margin + lineHeight
	for y := 0; y < ih; y++ {
		for x := 0; x < iw; x++ {
			k := (y/scale)*u.Columns + x/scale
			g := float64((u.Pix[k] - lo) / (hi - lo) * 255)
			r, gg, b := g, g, g
			if v := e.Picture.Map[k]; v > 0 && vmax > 0 {
				c := viridisAt(v / vmax)
				r = (1-overlayA)*g + overlayA*c[0]*255
				gg = (1-overlayA)*g + overlayA*c[1]*255
				b = (1-overlayA)*g + overlayA*c[2]*255
			}
			img.SetRGBA(margin+x, top+y, color.RGBA{R: byte8(r), G: byte8(gg), B: byte8(b), A: 255})
		}
	}
	// The peak cell, outlined in white, when some patch lowered the output.
	if vmax > 0 {
		s := e.StridePX * scale
		outline(img, image.Rect(margin+e.PeakCell.Col*s, top+e.PeakCell.Row*s, margin+(e.PeakCell.Col+1)*s, top+(e.PeakCell.Row+1)*s))
	}

	white := color.RGBA{255, 255, 255, 255}
	text(img, margin, margin+11, fmt.Sprintf("Occlusion map (%s, %s baseline, %d runs), p = %.3f", e.Method, e.Baseline, e.ModelRuns, res.CalibratedProb), white)

	// Legend: a bar from 0 (bottom) to vmax (top) and its scale.
	bx, bw := margin+iw+margin, 20
	for y := 0; y < ih; y++ {
		c := viridisAt(1 - float64(y)/float64(max(ih-1, 1)))
		for x := 0; x < bw; x++ {
			img.SetRGBA(bx+x, top+y, color.RGBA{R: byte8(c[0] * 255), G: byte8(c[1] * 255), B: byte8(c[2] * 255), A: 255})
		}
	}
	// With no positive drop there is no scale to show: say so instead of
	// labelling the bar 0 everywhere.
	for i := 0; i <= 4 && vmax > 0; i++ {
		y := top + (ih-1)*(4-i)/4
		for x := bw; x < bw+4; x++ {
			img.SetRGBA(bx+x, y, white)
		}
		text(img, bx+bw+6, y+4, fmt.Sprintf("%.3g", vmax*float64(i)/4), white)
	}
	if vmax <= 0 {
		for i, line := range []string{"no patch", "lowered the", "probability"} {
			text(img, bx+bw+6, top+lineHeight*(i+1), line, white)
		}
	}
	for i, l := range []string{"drop in", "calibrated", "probability", "when occluded;", "<= 0 uncoloured"} {
		text(img, bx+bw+6, top+ih/2+24+i*lineHeight, l, white)
	}
	for i, l := range notice {
		text(img, margin, top+ih+margin+11+i*lineHeight, l, color.RGBA{255, 220, 0, 255})
	}
	return img, nil
}

// Heatmap returns Picture as PNG bytes.
func Heatmap(res *midsag.Result) ([]byte, error) {
	img, err := Picture(res)
	if err != nil {
		return nil, err
	}
	var b bytes.Buffer
	if err := png.Encode(&b, img); err != nil {
		return nil, fmt.Errorf("explain: encode heatmap: %w", err)
	}
	return b.Bytes(), nil
}

// viridisAt returns the viridis colour at t in [0,1], nearest of the 256
// table entries.
func viridisAt(t float64) [3]float64 {
	i := int(math.Round(math.Min(math.Max(t, 0), 1) * 255))
	return viridis[i]
}

func byte8(v float64) uint8 { return uint8(math.Min(math.Max(math.Round(v), 0), 255)) }

func outline(img *image.RGBA, r image.Rectangle) {
	w := color.RGBA{255, 255, 255, 255}
	for x := r.Min.X; x < r.Max.X; x++ {
		img.SetRGBA(x, r.Min.Y, w)
		img.SetRGBA(x, r.Max.Y-1, w)
	}
	for y := r.Min.Y; y < r.Max.Y; y++ {
		img.SetRGBA(r.Min.X, y, w)
		img.SetRGBA(r.Max.X-1, y, w)
	}
}

// text draws s with its baseline at (x, y) in basicfont's 7x13 face.
func text(img *image.RGBA, x, y int, s string, c color.Color) {
	d := &font.Drawer{Dst: img, Src: image.NewUniform(c), Face: basicfont.Face7x13, Dot: fixed.P(x, y)}
	d.DrawString(s)
}

// wrap breaks s into lines of at most n characters at spaces.
func wrap(s string, n int) []string {
	var lines []string
	line := ""
	for _, w := range strings.Fields(s) {
		if line != "" && len(line)+1+len(w) > n {
			lines = append(lines, line)
			line = ""
		}
		if line != "" {
			line += " "
		}
		line += w
	}
	if line != "" {
		lines = append(lines, line)
	}
	return lines
}
