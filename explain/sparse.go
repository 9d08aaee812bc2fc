package explain

import (
	"context"
	"slices"
	"sort"
)

// latticeLines returns the lattice rows (or columns) of ModeSparse on a
// grid of n cells: every other one from the first, and the last, so that
// every cell lies between two measured lines and none is extrapolated.
func latticeLines(n int) []int {
	var l []int
	for i := 0; i < n; i += 2 {
		l = append(l, i)
	}
	if l[len(l)-1] != n-1 {
		l = append(l, n-1)
	}
	return l
}

// bracket returns the lattice lines a ≤ i ≤ b around i and i's weight
// toward b.
func bracket(lines []int, i int) (a, b int, f float64) {
	k := sort.SearchInts(lines, i)
	if lines[k] == i {
		return i, i, 0
	}
	a, b = lines[k-1], lines[k]
	return a, b, float64(i-a) / float64(b-a)
}

// computeSparse is ModeSparse. The lattice cells (latticeLines in both
// directions) are occluded with the same patch as the exhaustive map, so
// their drops are exact; every other cell not on air takes the bilinear
// interpolation of the raw drops of the four lattice cells around it (air
// cells hold a zero drop, as in the exhaustive map), and its probability
// drop is the calibrator's at the interpolated raw output, so ranking by
// either agrees. Then the interpolated cells at or above RefineQuantile
// of theirs are occluded, highest first, until MaxRuns runs are spent.
// Neighbouring patches overlap by half, so drops change slowly from cell
// to cell, which is what the interpolation relies on.
func computeSparse(ctx context.Context, r *runner, lay layout, opts Options, air []bool) (*Map, error) {
	g := newGrid(lay.h, lay.w, opts.StridePX, opts.PatchPX)
	mp := &Map{Mode: ModeSparse, Baseline: opts.Baseline, PatchPX: opts.PatchPX, StridePX: opts.StridePX, Levels: 1,
		Height: lay.h, Width: lay.w, GridRows: g.rows, GridCols: g.cols, AirCells: make([]bool, g.rows*g.cols)}
	rows, cols := latticeLines(g.rows), latticeLines(g.cols)
	cells := make([]Patch, g.rows*g.cols)
	var lattice []Patch
	for i := 0; i < g.rows; i++ {
		for j := 0; j < g.cols; j++ {
			p := g.patch(0, i, j)
			k := i*g.cols + j
			mp.AirCells[k] = onAir(air, lay.w, p)
			p.Run = !mp.AirCells[k]
			cells[k] = p
			if slices.Contains(rows, i) && slices.Contains(cols, j) {
				lattice = append(lattice, p)
			}
		}
	}
	if err := r.run(ctx, lattice); err != nil {
		return nil, err
	}
	measured := make([]bool, len(cells))
	for _, p := range lattice {
		k := p.Row*g.cols + p.Col
		cells[k], measured[k] = p, true
		if p.Run {
			mp.Runs++
		}
	}
	var cand []int
	for i := 0; i < g.rows; i++ {
		i0, i1, fi := bracket(rows, i)
		for j := 0; j < g.cols; j++ {
			k := i*g.cols + j
			if measured[k] || !cells[k].Run {
				continue
			}
			j0, j1, fj := bracket(cols, j)
			at := func(a, b int) float64 { return cells[a*g.cols+b].DropRaw }
			d := (1-fi)*((1-fj)*at(i0, j0)+fj*at(i0, j1)) + fi*((1-fj)*at(i1, j0)+fj*at(i1, j1))
			cells[k].DropRaw = d
			cells[k].DropProb = r.prob0 - r.m.Interpret(r.raw0-d).Calibrated
			cells[k].Interpolated = true
			cand = append(cand, k)
		}
	}
	budget := opts.MaxRuns
	if budget == 0 {
		budget = g.rows*g.cols/4 - 1
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
			if cells[k].DropRaw < th || (budget > 0 && mp.Runs+len(second) >= budget) {
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
