package explain

import (
	"slices"
)

// DefaultAirFraction places the air threshold at 10% of the way from the
// input's 2nd to its 98th percentile, the background threshold of the
// brain extraction tool of Smith 2002 ("Fast robust automated brain
// extraction", t = t2 + 0.1·(t98 − t2); from memory).
const DefaultAirFraction = 0.1

// airMask returns, per input pixel (h·w, row-major), whether it is air:
// its largest value over the slices lies below the threshold of
// airFraction, and it is connected to the input's border through such
// pixels (4-connectivity). Dark tissue enclosed by the body, such as
// cortical bone or a flow void, is therefore never air; isolated noise
// above the threshold only makes the mask smaller, so patches are run
// rather than skipped when in doubt.
func airMask(in []float32, lay layout, airFraction float64) []bool {
	n := lay.h * lay.w
	mx := make([]float32, n)
	for y := 0; y < lay.h; y++ {
		for x := 0; x < lay.w; x++ {
			v := in[lay.at(0, y, x)]
			for c := 1; c < lay.c; c++ {
				v = max(v, in[lay.at(c, y, x)])
			}
			mx[y*lay.w+x] = v
		}
	}
	sorted := slices.Clone(mx)
	p2, p98 := quantile(sorted, 0.02), quantile(sorted, 0.98)
	th := p2 + airFraction*(p98-p2)
	air := make([]bool, n)
	var stack []int
	push := func(k int) {
		if !air[k] && float64(mx[k]) < th {
			air[k] = true
			stack = append(stack, k)
		}
	}
	for x := 0; x < lay.w; x++ {
		push(x)
		push((lay.h-1)*lay.w + x)
	}
	for y := 0; y < lay.h; y++ {
		push(y * lay.w)
		push(y*lay.w + lay.w - 1)
	}
	for len(stack) > 0 {
		k := stack[len(stack)-1]
		stack = stack[:len(stack)-1]
		y, x := k/lay.w, k%lay.w
		if y > 0 {
			push(k - lay.w)
		}
		if y < lay.h-1 {
			push(k + lay.w)
		}
		if x > 0 {
			push(k - 1)
		}
		if x < lay.w-1 {
			push(k + 1)
		}
	}
	return air
}

// onAir reports whether every pixel of p is air in mask (nil: none is).
func onAir(mask []bool, w int, p Patch) bool {
	if mask == nil {
		return false
	}
	for y := p.Y0; y < p.Y1; y++ {
		for x := p.X0; x < p.X1; x++ {
			if !mask[y*w+x] {
				return false
			}
		}
	}
	return true
}
