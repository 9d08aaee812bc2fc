package explain

import (
	"context"
	"errors"
	"fmt"
	"math"

	"github.com/midsag/midsag"
)

// Explain makes the occlusion map of raw, m's output for prep.Input, and
// places its peak on the centre slice. It implements midsag.Explainer.
func (o *Occlusion) Explain(ctx context.Context, m midsag.Model, prep *midsag.Prepared, instances []*midsag.Instance, raw float64) (*midsag.Explanation, error) {
	if prep == nil || prep.Input == nil {
		return nil, errors.New("explain: no prepared input")
	}
	// A slice is a SOP Instance UID and, for a frame of a multi-frame
	// instance, its frame number: the frames of one instance each have
	// their own plane (PS3.3 C.7.6.16).
	type sliceKey struct {
		uid   string
		frame int
	}
	byKey := make(map[sliceKey]*midsag.Instance, len(instances))
	for _, src := range instances {
		for _, in := range src.Frames() {
			byKey[sliceKey{in.SOPInstanceUID, in.FrameNumber()}] = in
		}
	}
	center := byKey[sliceKey{prep.CenterSOPInstanceUID, prep.CenterFrameNumber}]
	if center == nil {
		return nil, fmt.Errorf("explain: centre slice %s (frame %d) is not among the instances", prep.CenterSOPInstanceUID, prep.CenterFrameNumber)
	}
	mp, err := o.Compute(ctx, m, prep.Input, raw)
	if err != nil {
		return nil, err
	}
	spec := m.InputSpec()
	g := newInputGeometry(center, spec)
	// The centre pixel of the peak cell, in input pixels.
	s := float64(mp.StridePX)
	ty := math.Min(float64(mp.PeakRow)*s+(s-1)/2, float64(mp.Height-1))
	tx := math.Min(float64(mp.PeakCol)*s+(s-1)/2, float64(mp.Width-1))
	row, col := g.toSlice(ty, tx)
	pr, pc := int(math.Round(row)), int(math.Round(col))

	sources := []midsag.ImageRef{{SOPClassUID: center.SOPClassUID, SOPInstanceUID: center.SOPInstanceUID, FrameNumber: center.FrameNumber()}}
	for _, sl := range prep.Slices {
		if in := byKey[sliceKey{sl.SOPInstanceUID, sl.FrameNumber}]; sl.InStack && in != nil && in != center {
			sources = append(sources, midsag.ImageRef{SOPClassUID: in.SOPClassUID, SOPInstanceUID: in.SOPInstanceUID, FrameNumber: in.FrameNumber()})
		}
	}
	method := "occlusion"
	switch {
	case mp.Mode == ModeSparse:
		method = "occlusion_sparse"
	case mp.Mode == ModeCoarseToFine && mp.Levels > 1:
		method = "occlusion_coarse_to_fine"
	}
	return &midsag.Explanation{
		Method:        method,
		Baseline:      mp.Baseline,
		PatchPX:       mp.PatchPX,
		StridePX:      mp.StridePX,
		GridRows:      mp.GridRows,
		GridCols:      mp.GridCols,
		Values:        mp.Values,
		RawValues:     mp.RawValues,
		Peak:          midsag.PixelPoint{Row: pr, Col: pc},
		PeakPatientMM: PatientMM(center, float64(pr), float64(pc)),
		PeakCell:      midsag.PixelPoint{Row: mp.PeakRow, Col: mp.PeakCol},
		ModelRuns:     mp.Runs + 1,
		Picture: &midsag.ExplanationPicture{
			Underlay: centerChannel(prep.Input, spec),
			Map:      mp.Pixels,
			Sources:  sources,
			Patient:  center.Patient,
		},
	}, nil
}

// PatientMM returns the patient coordinates (LPS, mm) of pixel (row, col)
// of in: P = IPP + col·Δc·rowDir + row·Δr·colDir, with Δr and Δc the row
// and column spacing of Pixel Spacing (PS3.3 C.7.6.2.1.1, 10.7.1.3).
func PatientMM(in *midsag.Instance, row, col float64) [3]float64 {
	r, c := unit(in.ImageOrientation[0:3]), unit(in.ImageOrientation[3:6])
	var p [3]float64
	for k := range p {
		p[k] = in.ImagePosition[k] + col*in.PixelSpacing[1]*r[k] + row*in.PixelSpacing[0]*c[k]
	}
	return p
}

func unit(v []float64) [3]float64 {
	n := math.Sqrt(v[0]*v[0] + v[1]*v[1] + v[2]*v[2])
	if n == 0 {
		return [3]float64{}
	}
	return [3]float64{v[0] / n, v[1] / n, v[2] / n}
}

// inputGeometry is how preprocess.Stack laid a slice onto the input grid:
// turned to the canonical view (a transpose, then flips), resampled to
// oh x ow and centred at (oy, ox). It mirrors preprocess's canonical and
// fit; TestGeometryMatchesStack checks the two agree.
type inputGeometry struct {
	transpose, flipX, flipY bool
	rows, cols              int // canonical image size
	oh, ow, oy, ox          int
}

func newInputGeometry(in *midsag.Instance, spec midsag.InputSpec) inputGeometry {
	r, c := unit(in.ImageOrientation[0:3]), unit(in.ImageOrientation[3:6])
	sp := in.PixelSpacing
	if sp[0] <= 0 || sp[1] <= 0 {
		sp = [2]float64{1, 1}
	}
	g := inputGeometry{rows: in.Rows, cols: in.Columns}
	if math.Abs(r[1]) < math.Abs(r[2]) {
		g.transpose = true
		g.rows, g.cols = in.Columns, in.Rows
		r, c = c, r
		sp[0], sp[1] = sp[1], sp[0]
	}
	g.flipX, g.flipY = r[1] < 0, c[2] > 0
	H, W := spec.Height, spec.Width
	hmm, wmm := float64(g.rows)*sp[0], float64(g.cols)*sp[1]
	if spec.PixelSpacingMM > 0 {
		g.oh, g.ow = int(math.Round(hmm/spec.PixelSpacingMM)), int(math.Round(wmm/spec.PixelSpacingMM))
	} else {
		scale := math.Min(float64(H)/hmm, float64(W)/wmm)
		g.oh, g.ow = int(math.Round(hmm*scale)), int(math.Round(wmm*scale))
	}
	g.oh, g.ow = max(g.oh, 1), max(g.ow, 1)
	g.oy, g.ox = (H-g.oh)/2, (W-g.ow)/2
	return g
}

// toSlice maps input pixel (ty, tx) to the slice's (row, column), clamped
// to the image. Resampling puts output pixel j's centre at input
// coordinate (j+0.5)·n/m − 0.5 (preprocess.resample1D, after Pillow).
func (g inputGeometry) toSlice(ty, tx float64) (float64, float64) {
	cy := (ty-float64(g.oy)+0.5)*float64(g.rows)/float64(g.oh) - 0.5
	cx := (tx-float64(g.ox)+0.5)*float64(g.cols)/float64(g.ow) - 0.5
	cy = math.Min(math.Max(cy, 0), float64(g.rows-1))
	cx = math.Min(math.Max(cx, 0), float64(g.cols-1))
	if g.flipY {
		cy = float64(g.rows-1) - cy
	}
	if g.flipX {
		cx = float64(g.cols-1) - cx
	}
	if g.transpose {
		return cx, cy
	}
	return cy, cx
}

// centerChannel returns the centre slice of a one-item input.
func centerChannel(in *midsag.Tensor, spec midsag.InputSpec) *midsag.Image {
	lay, err := layoutOf(in, spec)
	if err != nil {
		return nil
	}
	img := &midsag.Image{Rows: lay.h, Columns: lay.w, Pix: make([]float32, lay.h*lay.w)}
	c := lay.c / 2
	for y := 0; y < lay.h; y++ {
		for x := 0; x < lay.w; x++ {
			img.Pix[y*lay.w+x] = in.Data[lay.at(c, y, x)]
		}
	}
	return img
}
