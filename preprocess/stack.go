package preprocess

import (
	"fmt"
	"math"

	"github.com/midsag/midsag"
)

// StackIndices returns the slice indices fed to the model: the centre and
// its neighbours spec.SliceStep apart, ordered along the slice normal.
// Indices beyond the slab are clamped to its edge slice and reported.
func StackIndices(center, n int, spec midsag.InputSpec) ([]int, bool) {
	k, step := spec.Slices, max(spec.SliceStep, 1)
	idx := make([]int, k)
	clamped := false
	for j := range idx {
		i := center + (j-(k-1)/2)*step
		if i < 0 {
			i, clamped = 0, true
		}
		if i > n-1 {
			i, clamped = n-1, true
		}
		idx[j] = i
	}
	return idx, clamped
}

// Stack builds the model input from the picked slices. Each slice is turned
// to a canonical view (columns run anterior to posterior, rows superior to
// inferior), channels run from the patient's right to left, each slice is
// resampled to the input size with its aspect ratio kept and centred with
// padding, then intensities are normalised over the whole stack as the
// spec says. Padding takes the value that the stack's low percentile maps
// to (0 after "percentile" scaling).
func Stack(s *Slices, spec midsag.InputSpec) (*midsag.Tensor, []string, error) {
	if spec.Slices < 1 || spec.Height < 1 || spec.Width < 1 {
		return nil, nil, midsag.Rejectf(midsag.ReasonModelInputMismatch, "input spec asks for %d slices of %dx%d", spec.Slices, spec.Height, spec.Width)
	}
	idx, clamped := StackIndices(s.Center, len(s.Instances), spec)
	var flags []string
	if clamped {
		flags = append(flags, "stack_edge_replicated")
	}
	if vec3(s.Normal)[0] < 0 {
		for i, j := 0, len(idx)-1; i < j; i, j = i+1, j-1 {
			idx[i], idx[j] = idx[j], idx[i]
		}
	}
	H, W := spec.Height, spec.Width
	planes := make([][]float32, len(idx))
	masks := make([][]bool, len(idx))
	for c, i := range idx {
		img, sp := canonical(s.Instances[i], s.Images[i])
		planes[c], masks[c] = fit(img, sp, spec)
	}
	lo, hi := percentiles(planes, masks, spec.PercentileLow, spec.PercentileHigh)
	if hi <= lo {
		flags = append(flags, "flat_intensity")
		hi = lo + 1
	}
	data := make([]float32, len(idx)*H*W)
	for c := range planes {
		mean, std := 0.0, 1.0
		if spec.Normalize == "meanstd" {
			if c >= len(spec.Mean) || c >= len(spec.Std) || spec.Std[c] == 0 {
				return nil, nil, midsag.Rejectf(midsag.ReasonModelInputMismatch, "meanstd normalisation needs a mean and non-zero std for channel %d", c)
			}
			mean, std = spec.Mean[c], spec.Std[c]
		} else if spec.Normalize != "" && spec.Normalize != "percentile" {
			return nil, nil, fmt.Errorf("unknown normalisation %q", spec.Normalize)
		}
		for p, v := range planes[c] {
			x := 0.0
			if masks[c][p] {
				x = (float64(v) - lo) / (hi - lo)
				x = math.Min(1, math.Max(0, x))
			}
			x = (x - mean) / std
			if spec.Layout == "NHWC" {
				data[p*len(idx)+c] = float32(x)
			} else {
				data[c*H*W+p] = float32(x)
			}
		}
	}
	shape := []int64{1, int64(len(idx)), int64(H), int64(W)}
	if spec.Layout == "NHWC" {
		shape = []int64{1, int64(H), int64(W), int64(len(idx))}
	}
	return &midsag.Tensor{Shape: shape, Data: data}, flags, nil
}

// canonical returns the image turned so columns run anterior to posterior
// (+y) and rows superior to inferior (-z), with its (row, column) pixel
// spacing in mm.
func canonical(in *midsag.Instance, img *midsag.Image) (*midsag.Image, [2]float64) {
	r, c := rowDir(in), colDir(in)
	sp := in.PixelSpacing
	if sp[0] <= 0 || sp[1] <= 0 {
		sp = [2]float64{1, 1}
	}
	out := img
	if math.Abs(r[1]) < math.Abs(r[2]) {
		t := &midsag.Image{Rows: img.Columns, Columns: img.Rows, Pix: make([]float32, len(img.Pix))}
		for y := 0; y < img.Rows; y++ {
			for x := 0; x < img.Columns; x++ {
				t.Pix[x*t.Columns+y] = img.Pix[y*img.Columns+x]
			}
		}
		out, r, c = t, c, r
		sp[0], sp[1] = sp[1], sp[0]
	}
	flipX, flipY := r[1] < 0, c[2] > 0
	if flipX || flipY {
		f := &midsag.Image{Rows: out.Rows, Columns: out.Columns, Pix: make([]float32, len(out.Pix))}
		for y := 0; y < out.Rows; y++ {
			sy := y
			if flipY {
				sy = out.Rows - 1 - y
			}
			for x := 0; x < out.Columns; x++ {
				sx := x
				if flipX {
					sx = out.Columns - 1 - x
				}
				f.Pix[y*out.Columns+x] = out.Pix[sy*out.Columns+sx]
			}
		}
		out = f
	}
	return out, sp
}

// fit resamples img to the spec's spacing (or to fit, aspect kept) and
// centres it in an H x W plane; the mask marks pixels from the image.
func fit(img *midsag.Image, sp [2]float64, spec midsag.InputSpec) ([]float32, []bool) {
	H, W := spec.Height, spec.Width
	hmm, wmm := float64(img.Rows)*sp[0], float64(img.Columns)*sp[1]
	var oh, ow int
	if spec.PixelSpacingMM > 0 {
		oh, ow = int(math.Round(hmm/spec.PixelSpacingMM)), int(math.Round(wmm/spec.PixelSpacingMM))
	} else {
		scale := math.Min(float64(H)/hmm, float64(W)/wmm)
		oh, ow = int(math.Round(hmm*scale)), int(math.Round(wmm*scale))
	}
	oh, ow = max(oh, 1), max(ow, 1)
	res := resize(img, oh, ow)
	plane := make([]float32, H*W)
	mask := make([]bool, H*W)
	oy, ox := (H-oh)/2, (W-ow)/2
	for y := 0; y < oh; y++ {
		ty := y + oy
		if ty < 0 || ty >= H {
			continue
		}
		for x := 0; x < ow; x++ {
			tx := x + ox
			if tx < 0 || tx >= W {
				continue
			}
			plane[ty*W+tx] = res[y*ow+x]
			mask[ty*W+tx] = true
		}
	}
	return plane, mask
}

// resize resamples img to h x w with a separable triangle (linear) filter
// widened by the scale factor when shrinking, so downsampling averages
// rather than aliases; rows first, then columns, as Pillow does.
func resize(img *midsag.Image, h, w int) []float32 {
	tmp := resample1D(img.Pix, img.Rows, img.Columns, w) // rows x w
	tr := transpose(tmp, img.Rows, w)                    // w x rows
	out := resample1D(tr, w, img.Rows, h)                // w x h
	return transpose(out, w, h)                          // h x w
}

func transpose(p []float32, rows, cols int) []float32 {
	out := make([]float32, len(p))
	for y := 0; y < rows; y++ {
		for x := 0; x < cols; x++ {
			out[x*rows+y] = p[y*cols+x]
		}
	}
	return out
}

// resample1D resamples each of rows rows of length n to length m. The
// taps are those of Pillow's bilinear filter (Resample.c: a triangle of
// support max(1, scale) around (j+0.5)*scale, taps outside the image left
// out and the rest renormalised), so results can be checked against it.
func resample1D(p []float32, rows, n, m int) []float32 {
	scale := float64(n) / float64(m)
	support := math.Max(1, scale)
	type tap struct {
		idx []int
		w   []float32
	}
	taps := make([]tap, m)
	for j := range taps {
		center := (float64(j)+0.5)*scale - 0.5
		lo, hi := int(math.Floor(center-support)), int(math.Ceil(center+support))
		var t tap
		var sum float64
		for i := lo; i <= hi; i++ {
			wt := 1 - math.Abs(float64(i)-center)/support
			if wt <= 0 {
				continue
			}
			if i < 0 || i >= n {
				continue
			}
			t.idx = append(t.idx, i)
			t.w = append(t.w, float32(wt))
			sum += wt
		}
		for k := range t.w {
			t.w[k] /= float32(sum)
		}
		taps[j] = t
	}
	out := make([]float32, rows*m)
	for y := 0; y < rows; y++ {
		row := p[y*n : (y+1)*n]
		for j, t := range taps {
			var v float32
			for k, i := range t.idx {
				v += row[i] * t.w[k]
			}
			out[y*m+j] = v
		}
	}
	return out
}

// percentiles returns the low and high percentiles (0..100) of the masked
// pixels of all planes, by nearest rank.
func percentiles(planes [][]float32, masks [][]bool, low, high float64) (float64, float64) {
	if low == 0 && high == 0 {
		low, high = 0, 100
	}
	var vals []float32
	for c := range planes {
		for p, v := range planes[c] {
			if masks[c][p] {
				vals = append(vals, v)
			}
		}
	}
	if len(vals) == 0 {
		return 0, 1
	}
	at := func(q float64) int {
		return min(max(int(math.Round(q/100*float64(len(vals)-1))), 0), len(vals)-1)
	}
	i, j := at(low), at(high)
	if i > j {
		i, j = j, i
	}
	a, b := kthPair(vals, i, j)
	if at(low) > at(high) {
		a, b = b, a
	}
	return float64(a), float64(b)
}
