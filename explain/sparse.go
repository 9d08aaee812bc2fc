package explain

import (
	"context"
	"slices"
	"sort"
)

// computeSparse is the sparse mode (Options.Sparse): the finest grid's
// even cells are occluded first, with the same patch as the exhaustive
// map, so their drops are exact; odd cells take the bilinear
// interpolation of their even neighbours (air cells keep a zero drop, as
// in the exhaustive map); then the odd cells whose interpolated raw drop
// is highest are occluded too, within MaxRuns. Neighbouring patches
// overlap by half, so drops change slowly from cell to cell, which is
// what the interpolation relies on.
func computeSparse(ctx context.Context, r *runner, data []float32, lay layout, opts Options, air float64) (*Map, error) {
	g := newGrid(lay.h, lay.w, opts.StridePX, opts.PatchPX)
	mp := &Map{Baseline: opts.Baseline, PatchPX: opts.PatchPX, StridePX: opts.StridePX, Levels: 1, Sparse: true,
		Height: lay.h, Width: lay.w, GridRows: g.rows, GridCols: g.cols}
	cells := make([]Patch, g.rows*g.cols)
	measured := make([]bool, len(cells))
	var first []Patch
	for i := 0; i < g.rows; i++ {
		for j := 0; j < g.cols; j++ {
			p := g.patch(0, i, j)
			p.Run = patchMean(data, lay, p) > air
			cells[i*g.cols+j] = p
			if i%2 == 0 && j%2 == 0 {
				first = append(first, p)
			}
		}
	}
	if err := r.run(ctx, first); err != nil {
		return nil, err
	}
	for _, p := range first {
		k := p.Row*g.cols + p.Col
		cells[k], measured[k] = p, true
		if p.Run {
			mp.Runs++
		}
	}
	at := func(i, j int) Patch {
		i, j = min(i, (g.rows-1)/2*2), min(j, (g.cols-1)/2*2)
		return cells[i*g.cols+j]
	}
	var cand []int
	for i := 0; i < g.rows; i++ {
		for j := 0; j < g.cols; j++ {
			k := i*g.cols + j
			if measured[k] || !cells[k].Run {
				continue
			}
			i0, j0 := i/2*2, j/2*2
			fi, fj := float64(i-i0)/2, float64(j-j0)/2
			a, b, c, d := at(i0, j0), at(i0, j0+2), at(i0+2, j0), at(i0+2, j0+2)
			bl := func(va, vb, vc, vd float64) float64 {
				return (1-fi)*((1-fj)*va+fj*vb) + fi*((1-fj)*vc+fj*vd)
			}
			cells[k].DropRaw = bl(a.DropRaw, b.DropRaw, c.DropRaw, d.DropRaw)
			cells[k].DropProb = bl(a.DropProb, b.DropProb, c.DropProb, d.DropProb)
			cells[k].Interpolated = true
			cand = append(cand, k)
		}
	}
	if len(cand) > 0 {
		vals := make([]float64, len(cand))
		for n, k := range cand {
			vals[n] = cells[k].DropRaw
		}
		th := quantile64(slices.Clone(vals), opts.RefineQuantile)
		sort.SliceStable(cand, func(a, b int) bool { return cells[cand[a]].DropRaw > cells[cand[b]].DropRaw })
		var second []Patch
		for _, k := range cand {
			if cells[k].DropRaw < th || (opts.MaxRuns > 0 && mp.Runs+len(second) >= opts.MaxRuns) {
				break
			}
			p := cells[k]
			p.Interpolated = false
			second = append(second, p)
		}
		// Patch order, not rank order, so batching does not depend on ties.
		sort.Slice(second, func(a, b int) bool {
			return second[a].Row*g.cols+second[a].Col < second[b].Row*g.cols+second[b].Col
		})
		if err := r.run(ctx, second); err != nil {
			return nil, err
		}
		for _, p := range second {
			cells[p.Row*g.cols+p.Col] = p
			mp.Runs++
		}
	}
	lm := g.combine(cells, nil)
	mp.Values, mp.RawValues, mp.Pixels = lm.prob, lm.raw, lm.pixProb
	mp.Patches = cells
	mp.setPeak()
	return mp, nil
}
