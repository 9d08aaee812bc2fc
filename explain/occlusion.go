package explain

import (
	"context"
	"errors"
	"fmt"
	"math"
	"slices"
	"sort"

	"golang.org/x/sync/errgroup"

	"github.com/midsag/midsag"
)

// Defaults of Options.
const (
	// DefaultMode is ModeSparse: on phantom studies it keeps the
	// exhaustive map's ranking (top-10% cell overlap and Spearman
	// correlation, TestSparseFidelity) in a quarter of its model runs.
	DefaultMode = ModeSparse
	// DefaultLevels is the number of grids of ModeCoarseToFine.
	DefaultLevels = 3
	// DefaultRefineQuantile refines the top quarter of the cells run at
	// each level.
	DefaultRefineQuantile = 0.75
	// DefaultBatchSize is how many occluded copies go to one Predict call.
	// Chosen by measurement (bench/explain-batch.sh: one sparse map of a
	// ResNet-50-sized model at 3 x 512 x 512 on 2 CPU cores, 2026-12-03,
	// two runs on a shared machine): batch 1 was the fastest, batches 2,
	// 4, 8 and 16 took 1.38 to 2.35 times as long per map. On a CPU a
	// batch gains nothing once one call already keeps every core busy;
	// concurrency comes from Workers instead.
	DefaultBatchSize = 1
)

// Modes: which patches are occluded.
const (
	// ModeExhaustive occludes every cell of the finest grid.
	ModeExhaustive = "exhaustive"
	// ModeSparse occludes a lattice of every other row and column of the
	// finest grid (and its last row and column), interpolates the cells
	// between, then occludes the interpolated cells with the highest
	// values within MaxRuns.
	ModeSparse = "sparse"
	// ModeCoarseToFine occludes a coarse grid first and refines only its
	// cells at or above RefineQuantile, over Levels grids.
	ModeCoarseToFine = "coarse_to_fine"
)

// Baselines an occluded patch can be replaced by.
const (
	BaselineMean = "mean" // the input's per-channel mean
	BaselineZero = "zero" // zero, the value padding takes after percentile scaling
	BaselineBlur = "blur" // a blurred copy of the input
)

// Options tune an occlusion map. The zero value gives the defaults.
type Options struct {
	// PatchPX and StridePX are the finest patch side and stride in input
	// pixels. Zero means Height/8 and Height/16 (16 and 8 at 128 px), so
	// the finest grid is 16 x 16 at any input size; patches twice the
	// stride overlap by half, as in Zeiler and Fergus 2014 (their Fig. 7
	// slides a grey square in steps smaller than its side).
	PatchPX, StridePX int
	// Baseline is BaselineMean (default), BaselineZero or BaselineBlur.
	Baseline string
	// Mode is ModeSparse, ModeExhaustive or ModeCoarseToFine; empty means
	// DefaultMode.
	Mode string
	// Levels is the number of grids of ModeCoarseToFine, each with twice
	// the stride and patch of the next; 1 is the exhaustive map. Zero
	// means DefaultLevels.
	Levels int
	// RefineQuantile: in ModeCoarseToFine, at every level but the finest,
	// the cells run at that level whose drop in raw output is at or above
	// this quantile of theirs are split into the next level's four cells
	// (cells not refined pass their value down); in ModeSparse, only
	// interpolated cells at or above this quantile of theirs are occluded.
	// Zero means DefaultRefineQuantile.
	RefineQuantile float64
	// AirFraction sets the air threshold between the input's 2nd and 98th
	// percentiles (see airMask): a patch all of whose pixels are air,
	// outside the body, is not run and its drop is zero. Zero means
	// DefaultAirFraction; a negative value runs every patch.
	AirFraction float64
	// BatchSize is the number of occluded copies per Predict call; zero
	// means DefaultBatchSize, or 1 for a model that reports a fixed batch
	// (FixedBatch() bool, as models.Model does), which would run a batch
	// item by item inside Predict anyway.
	BatchSize int
	// Workers is the number of Predict calls in flight; zero means the
	// model's Concurrency() when it reports one (models.Model does), else
	// 1. The model bounds how many really run at once (models.Options).
	Workers int
	// MaxRuns caps the occluded runs of ModeSparse, lattice included; the
	// lattice itself is always run. Zero means a quarter of the finest
	// grid's cells less one, so that with the unoccluded run the map costs
	// at most a quarter of the exhaustive map's runs whenever the lattice
	// fits; negative means no cap.
	MaxRuns int
}

// fixedBatcher and concurrent are what a model may report about how it
// runs (models.Model reports both); explain uses them to spread runs.
type (
	fixedBatcher interface{ FixedBatch() bool }
	concurrent   interface{ Concurrency() int }
)

// forModel fills BatchSize and Workers left zero from what m reports: a
// model with a fixed batch gets one input per call, and as many calls in
// flight as the model runs at once, so runs spread over its runners
// instead of queueing inside one call.
func (o Options) forModel(m midsag.Model) Options {
	if f, ok := m.(fixedBatcher); ok && o.BatchSize == 0 && f.FixedBatch() {
		o.BatchSize = 1
	}
	if c, ok := m.(concurrent); ok && o.Workers == 0 {
		o.Workers = max(c.Concurrency(), 1)
	}
	return o
}

func (o Options) withDefaults(h int) (Options, error) {
	if o.StridePX == 0 {
		o.StridePX = max(h/16, 1)
	}
	if o.PatchPX == 0 {
		o.PatchPX = 2 * o.StridePX
	}
	if o.Baseline == "" {
		o.Baseline = BaselineMean
	}
	if o.Mode == "" {
		o.Mode = DefaultMode
	}
	if o.Mode == ModeExhaustive {
		o.Levels = 1
	}
	if o.Levels == 0 {
		o.Levels = DefaultLevels
	}
	if o.RefineQuantile == 0 {
		o.RefineQuantile = DefaultRefineQuantile
	}
	if o.AirFraction == 0 {
		o.AirFraction = DefaultAirFraction
	}
	if o.BatchSize == 0 {
		o.BatchSize = DefaultBatchSize
	}
	if o.Workers == 0 {
		o.Workers = 1
	}
	switch {
	case o.PatchPX < 1 || o.StridePX < 1 || o.Levels < 1 || o.BatchSize < 1 || o.Workers < 1:
		return o, fmt.Errorf("explain options: patch %d, stride %d, levels %d, batch %d and workers %d must be positive",
			o.PatchPX, o.StridePX, o.Levels, o.BatchSize, o.Workers)
	case o.RefineQuantile < 0 || o.RefineQuantile > 1:
		return o, fmt.Errorf("explain options: refine quantile %g is outside [0,1]", o.RefineQuantile)
	case o.Mode != ModeSparse && o.Mode != ModeExhaustive && o.Mode != ModeCoarseToFine:
		return o, fmt.Errorf("explain options: unknown mode %q (want sparse, exhaustive or coarse_to_fine)", o.Mode)
	case o.Baseline != BaselineMean && o.Baseline != BaselineZero && o.Baseline != BaselineBlur:
		return o, fmt.Errorf("explain options: unknown baseline %q (want mean, zero or blur)", o.Baseline)
	}
	return o, nil
}

// Patch is one occluded square: rows [Y0,Y1) and columns [X0,X1) of the
// input, in every slice.
type Patch struct {
	// Level is the grid it belongs to (0 is the coarsest); Row and Col
	// are its cell in that grid.
	Level, Row, Col int
	Y0, X0, Y1, X1  int
	// Run is false for a patch on air or padding that was not run.
	Run bool
	// Interpolated marks a sparse-mode patch whose drops were
	// interpolated from its neighbours instead of run.
	Interpolated bool
	// DropRaw is the unoccluded raw output minus the occluded one;
	// DropProb the same in calibrated probability.
	DropRaw, DropProb float64
}

// Map is an occlusion map on the finest grid.
type Map struct {
	Mode             string
	Baseline         string
	PatchPX          int
	StridePX         int
	Levels           int
	Height, Width    int
	GridRows         int
	GridCols         int
	Values           []float64 // drop in calibrated probability per cell
	RawValues        []float64 // drop in raw output per cell
	Pixels           []float64 // drop in calibrated probability per input pixel
	Patches          []Patch   // every patch, run or not, level by level
	Runs             int       // occluded inputs run (the unoccluded run not included)
	AirCells         []bool    // per cell: its patch lies wholly on air
	PeakRow, PeakCol int       // the highest cell of Values not on air
}

// Occlusion is an occlusion-sensitivity Explainer. It is safe for
// concurrent use.
type Occlusion struct {
	opts Options
}

// New returns an Occlusion with the given options; bad options are
// reported by Explain and Compute.
func New(opts Options) *Occlusion { return &Occlusion{opts: opts} }

var _ midsag.Explainer = (*Occlusion)(nil)

// layout indexes one input item of the model's layout.
type layout struct {
	c, h, w int
	nhwc    bool
}

func (l layout) at(c, y, x int) int {
	if l.nhwc {
		return (y*l.w+x)*l.c + c
	}
	return (c*l.h+y)*l.w + x
}

func layoutOf(in *midsag.Tensor, spec midsag.InputSpec) (layout, error) {
	if in == nil || len(in.Shape) != 4 || in.Shape[0] != 1 {
		return layout{}, errors.New("explain: want one input item of rank 4")
	}
	s := in.Shape
	l := layout{c: int(s[1]), h: int(s[2]), w: int(s[3])}
	if spec.Layout == "NHWC" {
		l = layout{h: int(s[1]), w: int(s[2]), c: int(s[3]), nhwc: true}
	}
	if l.c*l.h*l.w != len(in.Data) {
		return layout{}, fmt.Errorf("explain: input shape %v holds %d values, got %d", s, l.c*l.h*l.w, len(in.Data))
	}
	return l, nil
}

// Compute makes the occlusion map of m's output for in, one item laid out
// as m.InputSpec says; raw is m's output for the unoccluded in, shared
// with the scoring run so it is not run again.
func (o *Occlusion) Compute(ctx context.Context, m midsag.Model, in *midsag.Tensor, raw float64) (*Map, error) {
	spec := m.InputSpec()
	lay, err := layoutOf(in, spec)
	if err != nil {
		return nil, err
	}
	opts, err := o.opts.forModel(m).withDefaults(lay.h)
	if err != nil {
		return nil, err
	}
	base := baseline(in.Data, lay, opts)
	var air []bool
	if opts.AirFraction > 0 {
		air = airMask(in.Data, lay, opts.AirFraction)
	}
	prob0 := m.Interpret(raw).Calibrated
	r := &runner{m: m, in: in.Data, base: base, lay: lay, shape: in.Shape, opts: opts, raw0: raw, prob0: prob0}
	if opts.Mode == ModeSparse {
		return computeSparse(ctx, r, lay, opts, air)
	}

	mp := &Map{Mode: opts.Mode, Baseline: opts.Baseline, PatchPX: opts.PatchPX, StridePX: opts.StridePX, Levels: opts.Levels,
		Height: lay.h, Width: lay.w}
	var (
		parent     *levelMap
		refineCell map[[2]int]bool
	)
	for l := 0; l < opts.Levels; l++ {
		f := 1 << (opts.Levels - 1 - l)
		g := newGrid(lay.h, lay.w, opts.StridePX*f, max(opts.PatchPX, opts.StridePX*f))
		var todo []Patch
		for i := 0; i < g.rows; i++ {
			for j := 0; j < g.cols; j++ {
				if l > 0 && !refineCell[[2]int{i / 2, j / 2}] {
					continue
				}
				p := g.patch(l, i, j)
				p.Run = !onAir(air, lay.w, p)
				todo = append(todo, p)
			}
		}
		if err := r.run(ctx, todo); err != nil {
			return nil, err
		}
		for _, p := range todo {
			if p.Run {
				mp.Runs++
			}
		}
		mp.Patches = append(mp.Patches, todo...)
		lm := g.combine(todo, parent)
		if l == opts.Levels-1 {
			mp.GridRows, mp.GridCols = g.rows, g.cols
			mp.Values, mp.RawValues, mp.Pixels = lm.prob, lm.raw, lm.pixProb
			mp.AirCells = make([]bool, g.rows*g.cols)
			for k := range mp.AirCells {
				mp.AirCells[k] = onAir(air, lay.w, g.patch(l, k/g.cols, k%g.cols))
			}
			break
		}
		refineCell = refineSet(todo, lm, g, opts.RefineQuantile)
		parent = lm
	}
	mp.setPeak()
	return mp, nil
}

// setPeak sets the peak to the highest cell of Values whose patch is not
// on air (any cell when all are), ties broken by the raw drop. Air cells
// hold a zero drop by construction, which must not outrank a map whose
// every measured drop is negative.
func (mp *Map) setPeak() {
	better := func(k, b int) bool {
		if mp.AirCells[k] != mp.AirCells[b] {
			return !mp.AirCells[k]
		}
		if mp.Values[k] != mp.Values[b] {
			return mp.Values[k] > mp.Values[b]
		}
		return mp.RawValues[k] > mp.RawValues[b]
	}
	best := 0
	for k := 1; k < len(mp.Values); k++ {
		if better(k, best) {
			best = k
		}
	}
	mp.PeakRow, mp.PeakCol = best/mp.GridCols, best%mp.GridCols
}

// refineSet returns the cells run at this level whose raw drop is at or
// above the quantile q of theirs, and the cells skipped as air: their
// children are tested for air in turn, at no cost when they are air too,
// so refining every cell gives the exhaustive map. Ranking by raw drop
// ranks by probability drop too for a monotone calibrator, and does not
// flatten where the sigmoid saturates.
func refineSet(run []Patch, lm *levelMap, g grid, q float64) map[[2]int]bool {
	var vals []float64
	for _, p := range run {
		if p.Run {
			vals = append(vals, lm.raw[p.Row*g.cols+p.Col])
		}
	}
	th := math.Inf(1)
	if len(vals) > 0 {
		th = quantile64(slices.Clone(vals), q)
	}
	set := map[[2]int]bool{}
	for _, p := range run {
		if !p.Run || lm.raw[p.Row*g.cols+p.Col] >= th {
			set[[2]int{p.Row, p.Col}] = true
		}
	}
	return set
}

// grid is one level's cells of stride x stride pixels, each with a patch
// of side patch centred on it.
type grid struct {
	h, w, stride, side int
	rows, cols         int
}

func newGrid(h, w, stride, patch int) grid {
	return grid{h: h, w: w, stride: stride, side: patch,
		rows: (h + stride - 1) / stride, cols: (w + stride - 1) / stride}
}

func (g grid) patch(level, i, j int) Patch {
	cy, cx := i*g.stride+g.stride/2, j*g.stride+g.stride/2
	y0, x0 := cy-g.side/2, cx-g.side/2
	return Patch{Level: level, Row: i, Col: j,
		Y0: max(y0, 0), X0: max(x0, 0), Y1: min(y0+g.side, g.h), X1: min(x0+g.side, g.w)}
}

// interpolate returns the bilinear interpolation of cell values v at
// pixel position (y, x), with cell values placed at cell centres and held
// constant beyond the outer centres.
func (g grid) interpolate(v []float64, y, x float64) float64 {
	fy := math.Min(math.Max((y-float64(g.stride)/2)/float64(g.stride), 0), float64(g.rows-1))
	fx := math.Min(math.Max((x-float64(g.stride)/2)/float64(g.stride), 0), float64(g.cols-1))
	i0, j0 := int(fy), int(fx)
	i1, j1 := min(i0+1, g.rows-1), min(j0+1, g.cols-1)
	ty, tx := fy-float64(i0), fx-float64(j0)
	top := v[i0*g.cols+j0]*(1-tx) + v[i0*g.cols+j1]*tx
	bot := v[i1*g.cols+j0]*(1-tx) + v[i1*g.cols+j1]*tx
	return top*(1-ty) + bot*ty
}

// levelMap is one level's map: per pixel and per cell.
type levelMap struct {
	pixProb, pixRaw []float64
	prob, raw       []float64
	g               grid
}

// combine averages, per pixel, the drops of every patch of the level:
// those run (or skipped as air) here and, for cells not refined, the
// parent level's cell values interpolated bilinearly at the cell's centre
// and divided by the ratio of the parent's patch area to this level's. The
// division is exact for a model linear in its input, where a patch's drop
// is the sum over its pixels; coarse levels use patches as large as their
// stride, so the two finest levels share a patch size and need none.
func (g grid) combine(run []Patch, parent *levelMap) *levelMap {
	have := make(map[[2]int]Patch, len(run))
	for _, p := range run {
		have[[2]int{p.Row, p.Col}] = p
	}
	n := g.h * g.w
	sumP, sumR, cnt := make([]float64, n), make([]float64, n), make([]float64, n)
	for i := 0; i < g.rows; i++ {
		for j := 0; j < g.cols; j++ {
			p, ok := have[[2]int{i, j}]
			if !ok {
				if parent == nil {
					continue
				}
				p = g.patch(0, i, j)
				area := float64(parent.g.side*parent.g.side) / float64(g.side*g.side)
				cy, cx := float64(i*g.stride)+float64(g.stride)/2, float64(j*g.stride)+float64(g.stride)/2
				p.DropProb = parent.g.interpolate(parent.prob, cy, cx) / area
				p.DropRaw = parent.g.interpolate(parent.raw, cy, cx) / area
			}
			for y := p.Y0; y < p.Y1; y++ {
				for x := p.X0; x < p.X1; x++ {
					sumP[y*g.w+x] += p.DropProb
					sumR[y*g.w+x] += p.DropRaw
					cnt[y*g.w+x]++
				}
			}
		}
	}
	for k := range cnt {
		if cnt[k] > 0 {
			sumP[k] /= cnt[k]
			sumR[k] /= cnt[k]
		}
	}
	lm := &levelMap{pixProb: sumP, pixRaw: sumR, g: g,
		prob: make([]float64, g.rows*g.cols), raw: make([]float64, g.rows*g.cols)}
	for i := 0; i < g.rows; i++ {
		for j := 0; j < g.cols; j++ {
			var sp, sr, c float64
			for y := i * g.stride; y < min((i+1)*g.stride, g.h); y++ {
				for x := j * g.stride; x < min((j+1)*g.stride, g.w); x++ {
					sp += sumP[y*g.w+x]
					sr += sumR[y*g.w+x]
					c++
				}
			}
			lm.prob[i*g.cols+j], lm.raw[i*g.cols+j] = sp/c, sr/c
		}
	}
	return lm
}

// runner runs the model on occluded copies of one input.
type runner struct {
	m           midsag.Model
	in, base    []float32
	lay         layout
	shape       []int64
	opts        Options
	raw0, prob0 float64
}

// run fills DropRaw and DropProb of the patches marked Run, in batches of
// opts.BatchSize with opts.Workers calls in flight. Batches are formed in
// patch order whatever the worker count, so the result does not depend on
// it.
func (r *runner) run(ctx context.Context, ps []Patch) error {
	var idx []int
	for k, p := range ps {
		if p.Run {
			idx = append(idx, k)
		}
	}
	var batches [][]int
	for s := 0; s < len(idx); s += r.opts.BatchSize {
		batches = append(batches, idx[s:min(s+r.opts.BatchSize, len(idx))])
	}
	g, gctx := errgroup.WithContext(ctx)
	g.SetLimit(max(r.opts.Workers, 1))
	for _, b := range batches {
		if gctx.Err() != nil {
			break
		}
		g.Go(func() error { return r.batch(gctx, ps, b) })
	}
	if err := g.Wait(); err != nil {
		return err
	}
	if err := ctx.Err(); err != nil {
		return fmt.Errorf("explain: %w", err)
	}
	return nil
}

// batch runs the patches ps[b...] as one Predict call. Each goroutine
// writes only its own patches.
func (r *runner) batch(ctx context.Context, ps []Patch, b []int) error {
	per := len(r.in)
	data := make([]float32, per*len(b))
	for k, pi := range b {
		item := data[k*per : (k+1)*per]
		copy(item, r.in)
		p := ps[pi]
		for c := 0; c < r.lay.c; c++ {
			for y := p.Y0; y < p.Y1; y++ {
				for x := p.X0; x < p.X1; x++ {
					i := r.lay.at(c, y, x)
					item[i] = r.base[i]
				}
			}
		}
	}
	shape := append([]int64{int64(len(b))}, r.shape[1:]...)
	out, err := r.m.Predict(ctx, &midsag.Tensor{Shape: shape, Data: data})
	if err != nil {
		return fmt.Errorf("explain: predict occluded batch: %w", err)
	}
	if len(out) != len(b) {
		return fmt.Errorf("explain: model returned %d outputs for %d occluded inputs", len(out), len(b))
	}
	for k, pi := range b {
		ps[pi].DropRaw = r.raw0 - out[k]
		ps[pi].DropProb = r.prob0 - r.m.Interpret(out[k]).Calibrated
	}
	return nil
}

// baseline returns the full-size replacement image for opts.Baseline.
func baseline(in []float32, lay layout, opts Options) []float32 {
	out := make([]float32, len(in))
	switch opts.Baseline {
	case BaselineZero:
	case BaselineMean:
		for c := 0; c < lay.c; c++ {
			var s float64
			for y := 0; y < lay.h; y++ {
				for x := 0; x < lay.w; x++ {
					s += float64(in[lay.at(c, y, x)])
				}
			}
			m := float32(s / float64(lay.h*lay.w))
			for y := 0; y < lay.h; y++ {
				for x := 0; x < lay.w; x++ {
					out[lay.at(c, y, x)] = m
				}
			}
		}
	case BaselineBlur:
		// Three box passes of radius patch/4 approximate a Gaussian of
		// sigma about patch/4 (common practice), blurring away detail at
		// the patch's scale while keeping the local mean.
		rad := max(opts.PatchPX/4, 1)
		for c := 0; c < lay.c; c++ {
			plane := make([]float64, lay.h*lay.w)
			for y := 0; y < lay.h; y++ {
				for x := 0; x < lay.w; x++ {
					plane[y*lay.w+x] = float64(in[lay.at(c, y, x)])
				}
			}
			for range 3 {
				plane = boxBlur(plane, lay.h, lay.w, rad)
			}
			for y := 0; y < lay.h; y++ {
				for x := 0; x < lay.w; x++ {
					out[lay.at(c, y, x)] = float32(plane[y*lay.w+x])
				}
			}
		}
	}
	return out
}

// boxBlur averages each pixel over the (2r+1)^2 window clipped to the
// image, rows then columns.
func boxBlur(p []float64, h, w, r int) []float64 {
	tmp := make([]float64, len(p))
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			var s float64
			lo, hi := max(x-r, 0), min(x+r, w-1)
			for k := lo; k <= hi; k++ {
				s += p[y*w+k]
			}
			tmp[y*w+x] = s / float64(hi-lo+1)
		}
	}
	out := make([]float64, len(p))
	for y := 0; y < h; y++ {
		lo, hi := max(y-r, 0), min(y+r, h-1)
		for x := 0; x < w; x++ {
			var s float64
			for k := lo; k <= hi; k++ {
				s += tmp[k*w+x]
			}
			out[y*w+x] = s / float64(hi-lo+1)
		}
	}
	return out
}

// quantile returns the q quantile (0..1) of v by nearest rank; it sorts v.
func quantile(v []float32, q float64) float64 {
	slices.Sort(v)
	return float64(v[min(max(int(math.Round(q*float64(len(v)-1))), 0), len(v)-1)])
}

func quantile64(v []float64, q float64) float64 {
	sort.Float64s(v)
	return v[min(max(int(math.Round(q*float64(len(v)-1))), 0), len(v)-1)]
}
