package explain

import (
	"context"
	"math"
	"slices"
	"sort"
	"testing"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/models"
	"github.com/midsag/midsag/models/demo"
	"github.com/midsag/midsag/phantom"
	"github.com/midsag/midsag/preprocess"
)

// phantomCase is one phantom study prepared for the demo model.
type phantomCase struct {
	truth     phantom.StudyTruth
	instances []*midsag.Instance
	prep      *midsag.Prepared
	raw       float64
}

func demoModel(t testing.TB) *models.Model {
	t.Helper()
	needORT(t)
	m, err := models.LoadBytes(demo.Name, demo.ONNX, nil, models.Options{})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { m.Close() })
	return m
}

// phantomCases prepares n phantom studies (T2 sagittal series only, all
// with cord compression) of the given seed.
func phantomCases(t testing.TB, m midsag.Model, seed int64, n int) []phantomCase {
	t.Helper()
	pre := preprocess.New(preprocess.Options{})
	opts := phantom.Options{Seed: seed, NoDecoys: true, CompressionRate: 1}
	var out []phantomCase
	for i := 0; i < n; i++ {
		files, truth, err := phantom.GenerateStudy(opts, i)
		if err != nil {
			t.Fatal(err)
		}
		insts, err := phantom.ReadAll(pre, files)
		if err != nil {
			t.Fatal(err)
		}
		prep, err := pre.Prepare(context.Background(), insts, m.InputSpec())
		if err != nil {
			t.Fatalf("study %d: %v", i, err)
		}
		out = append(out, phantomCase{truth: truth, instances: insts, prep: prep, raw: predictOne(t, m, prep.Input)})
	}
	return out
}

// discIndex gives each disc level its index k in phantom/anatomy.go's
// discNames, whose disc k lies at local z = (2−k)·period above (+z) the
// cord point at C4-C5.
var discIndex = map[string]int{"C2-C3": 0, "C3-C4": 1, "C4-C5": 2, "C5-C6": 3, "C6-C7": 4, "C7-T1": 5}

// Vertebral period of the phantom neck, 17.5-20 mm (phantom/anatomy.go).
const periodLo, periodHi = 17.5, 20.0

// hit reports whether the map's peak lies within one vertebral level of
// the compressed disc along the head-foot axis. The disc's z is known only
// up to the study's period, so the peak is compared with the interval of
// z the disc can take, and a level is taken as the shortest period. The
// neck's axis is tilted at most 6° from patient z (phantom/study.go), so
// patient z stands for the neck's own axis within 0.6%.
func hit(c phantomCase, e *midsag.Explanation) (bool, float64) {
	k := discIndex[c.truth.Level]
	a := c.truth.CordPointMM[2] + float64(2-k)*periodLo
	b := c.truth.CordPointMM[2] + float64(2-k)*periodHi
	lo, hi := math.Min(a, b), math.Max(a, b)
	z := e.PeakPatientMM[2]
	d := math.Max(0, math.Max(lo-z, z-hi))
	return d <= periodLo, d
}

// TestPointingGame plays the pointing game (Zhang et al. 2016) with the
// demo model on 30 phantom studies with cord compression at a known disc:
// a hit is a map peak within one vertebral level of that disc. The demo
// model was trained on phantoms of other seeds (models/demo/README.md).
func TestPointingGame(t *testing.T) {
	if testing.Short() {
		t.Skip("30 phantom studies; skipped with -short")
	}
	m := demoModel(t)
	cases := phantomCases(t, m, 4242, 30)
	for _, mode := range []struct {
		name string
		opts Options
		// min is the rate guarded, the goal of 0.9. (A demo model trained
		// without occlusion augmentation reached 23/30 with the mean
		// baseline: models/demo/README.md.)
		min float64
	}{{"exhaustive", Options{Mode: ModeExhaustive}, 0.9}, {"sparse", Options{}, 0.9},
		{"exhaustive_blur", Options{Mode: ModeExhaustive, Baseline: BaselineBlur}, 0.9},
		{"sparse_blur", Options{Baseline: BaselineBlur}, 0.9}} {
		hits, positive := 0, 0
		for i, c := range cases {
			e, err := New(mode.opts).Explain(context.Background(), m, c.prep, c.instances, c.raw)
			if err != nil {
				t.Fatal(err)
			}
			ok, d := hit(c, e)
			if ok {
				hits++
			}
			if m.Interpret(c.raw).Decision == "compression" {
				positive++
			}
			t.Logf("%s study %d %s p=%.3f peak z %.1f (cord %.1f) off by %.1f mm hit %v runs %d",
				mode.name, i, c.truth.Level, m.Interpret(c.raw).Calibrated, e.PeakPatientMM[2], c.truth.CordPointMM[2], d, ok, e.ModelRuns)
		}
		rate := float64(hits) / float64(len(cases))
		t.Logf("%s: pointing game %d/%d = %.2f (model called %d of %d positive)", mode.name, hits, len(cases), rate, positive, len(cases))
		if rate < mode.min {
			t.Errorf("%s: pointing-game rate %.2f below %.1f", mode.name, rate, mode.min)
		}
	}
}

// spearman is Spearman's rank correlation with average ranks for ties
// (Spearman 1904; ties as in scipy.stats.spearmanr).
func spearman(a, b []float64) float64 {
	ra, rb := ranks(a), ranks(b)
	var ma, mb float64
	for i := range ra {
		ma += ra[i]
		mb += rb[i]
	}
	ma /= float64(len(ra))
	mb /= float64(len(rb))
	var sab, saa, sbb float64
	for i := range ra {
		sab += (ra[i] - ma) * (rb[i] - mb)
		saa += (ra[i] - ma) * (ra[i] - ma)
		sbb += (rb[i] - mb) * (rb[i] - mb)
	}
	return sab / math.Sqrt(saa*sbb)
}

func ranks(v []float64) []float64 {
	idx := make([]int, len(v))
	for i := range idx {
		idx[i] = i
	}
	sort.SliceStable(idx, func(i, j int) bool { return v[idx[i]] < v[idx[j]] })
	r := make([]float64, len(v))
	for i := 0; i < len(idx); {
		j := i
		for j+1 < len(idx) && v[idx[j+1]] == v[idx[i]] {
			j++
		}
		for k := i; k <= j; k++ {
			r[idx[k]] = float64(i+j)/2 + 1
		}
		i = j + 1
	}
	return r
}

// topOverlap is the share of a's top fraction q of cells that are also in
// b's top fraction q.
func topOverlap(a, b []float64, q float64) float64 {
	k := int(math.Ceil(q * float64(len(a))))
	top := func(v []float64) map[int]bool {
		idx := make([]int, len(v))
		for i := range idx {
			idx[i] = i
		}
		sort.SliceStable(idx, func(i, j int) bool { return v[idx[i]] > v[idx[j]] })
		s := map[int]bool{}
		for _, i := range idx[:k] {
			s[i] = true
		}
		return s
	}
	ta, tb := top(a), top(b)
	n := 0
	for i := range ta {
		if tb[i] {
			n++
		}
	}
	return float64(n) / float64(k)
}

// TestSpearmanReference checks spearman against a value worked by hand:
// x = 1..5, y = 5,6,7,8,7 has ranks 1,2,3.5,5,3.5, d² sum 0+0+0.25+1+2.25
// = 3.5; with ties the Pearson correlation of ranks is 0.8208 (scipy
// 1.10 spearmanr gives 0.82078268, from memory of its documented tie rule).
func TestSpearmanReference(t *testing.T) {
	got := spearman([]float64{1, 2, 3, 4, 5}, []float64{5, 6, 7, 8, 7})
	if math.Abs(got-0.820782681) > 1e-6 {
		t.Errorf("spearman %.9f, want 0.820782681", got)
	}
}

// fidelity compares coarse-to-fine maps with the exhaustive one on cases.
type fidelity struct {
	levels         int
	q              float64
	runs, over, rs float64 // means over cases
	minOver, minRS float64
}

func measureFidelity(t testing.TB, m midsag.Model, cases []phantomCase, settings []Options) []fidelity {
	t.Helper()
	ctx := context.Background()
	exact := make([]*Map, len(cases))
	for i, c := range cases {
		mp, err := New(Options{Mode: ModeExhaustive}).Compute(ctx, m, c.prep.Input, c.raw)
		if err != nil {
			t.Fatal(err)
		}
		exact[i] = mp
	}
	var out []fidelity
	for _, o := range settings {
		f := fidelity{levels: o.Levels, q: o.RefineQuantile, minOver: 1, minRS: 1}
		for i, c := range cases {
			mp, err := New(o).Compute(ctx, m, c.prep.Input, c.raw)
			if err != nil {
				t.Fatal(err)
			}
			ov, rs := topOverlap(mp.Values, exact[i].Values, 0.1), spearman(mp.Values, exact[i].Values)
			f.runs += float64(mp.Runs+1) / float64(len(cases))
			f.over += ov / float64(len(cases))
			f.rs += rs / float64(len(cases))
			f.minOver, f.minRS = math.Min(f.minOver, ov), math.Min(f.minRS, rs)
		}
		out = append(out, f)
	}
	return out
}

// TestCoarseToFineFidelity measures model runs against fidelity to the
// exhaustive 16 x 16 map (top-10% cell overlap, Spearman over cells) on 12
// phantom studies with the demo model, for two and three levels and
// several refine quantiles, and logs the curve (the goal was at most 64
// runs with overlap >= 0.8 and Spearman >= 0.85). It checks what must
// hold whatever the model: refining every cell reproduces the exhaustive
// map exactly, and a higher quantile never costs more runs.
func TestCoarseToFineFidelity(t *testing.T) {
	if testing.Short() {
		t.Skip("12 phantom studies; skipped with -short")
	}
	m := demoModel(t)
	cases := phantomCases(t, m, 777, 12)
	var settings []Options
	for _, lv := range []int{2, 3} {
		for _, q := range []float64{1e-9, 0.5, 0.625, 0.75, 0.875} {
			settings = append(settings, Options{Mode: ModeCoarseToFine, Levels: lv, RefineQuantile: q})
		}
	}
	res := measureFidelity(t, m, cases, settings)
	t.Logf("levels quantile runs overlap(mean,min) spearman(mean,min) against the exhaustive map")
	for i, f := range res {
		t.Logf("%d %.3f %6.1f  %.3f %.3f  %.3f %.3f", f.levels, f.q, f.runs, f.over, f.minOver, f.rs, f.minRS)
		if f.q < 0.01 && (f.minOver != 1 || f.minRS < 1-1e-12) {
			t.Errorf("levels %d refining every cell: overlap %.3f, Spearman %.6f; want the exhaustive map", f.levels, f.minOver, f.minRS)
		}
		if i > 0 && res[i-1].levels == f.levels && f.runs > res[i-1].runs {
			t.Errorf("levels %d: quantile %.3f costs %.1f runs, more than %.1f at %.3f", f.levels, f.q, f.runs, res[i-1].runs, res[i-1].q)
		}
	}
}

// TestSparseFidelity measures ModeSparse against the exhaustive map of the
// same baseline on 12 phantom studies with the demo model, and logs runs
// against fidelity for several run budgets: top-10% cell overlap and
// Spearman correlation over all cells (the goal: >= 0.8 and >= 0.85 in at
// most 64 model runs, the unoccluded one included), and the same over the
// cells not on air only, which the zero drops of air cells cannot flatter.
// Refining every cell must reproduce the exhaustive map exactly, whatever
// the model.
func TestSparseFidelity(t *testing.T) {
	if testing.Short() {
		t.Skip("12 phantom studies; skipped with -short")
	}
	m := demoModel(t)
	cases := phantomCases(t, m, 777, 12)
	ctx := context.Background()
	for _, b := range []string{BaselineMean, BaselineBlur} {
		exact := make([]*Map, len(cases))
		for i, c := range cases {
			mp, err := New(Options{Mode: ModeExhaustive, Baseline: b}).Compute(ctx, m, c.prep.Input, c.raw)
			if err != nil {
				t.Fatal(err)
			}
			exact[i] = mp
			all, err := New(Options{RefineQuantile: 1e-12, MaxRuns: -1, Baseline: b}).Compute(ctx, m, c.prep.Input, c.raw)
			if err != nil {
				t.Fatal(err)
			}
			if !slices.Equal(all.Values, mp.Values) || !slices.Equal(all.RawValues, mp.RawValues) || all.Runs != mp.Runs {
				t.Fatalf("%s study %d: sparse refining every cell differs from exhaustive", b, i)
			}
		}
		t.Logf("%s baseline: exhaustive map %.1f model runs on average", b, meanRuns(exact))
		for _, maxRuns := range []int{1, 47, 0, 79, 111} {
			var runs, over, rs, overT, rsT float64
			maxTotal := 0
			for i, c := range cases {
				mp, err := New(Options{MaxRuns: maxRuns, Baseline: b}).Compute(ctx, m, c.prep.Input, c.raw)
				if err != nil {
					t.Fatal(err)
				}
				n := float64(len(cases))
				runs += float64(mp.Runs+1) / n
				maxTotal = max(maxTotal, mp.Runs+1)
				over += topOverlap(mp.Values, exact[i].Values, 0.1) / n
				rs += spearman(mp.Values, exact[i].Values) / n
				a, e := tissue(mp.Values, mp.AirCells), tissue(exact[i].Values, mp.AirCells)
				overT += topOverlap(a, e, 0.1) / n
				rsT += spearman(a, e) / n
			}
			t.Logf("sparse, %s baseline, max runs %3d: %5.1f runs (at most %d), all cells: top-10%% overlap %.3f, Spearman %.3f; cells not on air: %.3f, %.3f",
				b, maxRuns, runs, maxTotal, over, rs, overT, rsT)
			if maxRuns == 0 && (maxTotal > 64 || over < 0.8 || rs < 0.85 || overT < 0.8 || rsT < 0.85) {
				t.Errorf("sparse, %s baseline, default budget: at most %d runs, overlap %.3f / %.3f, Spearman %.3f / %.3f (all cells / not on air); want <= 64, >= 0.8, >= 0.85",
					b, maxTotal, over, overT, rs, rsT)
			}
		}
	}
}

// tissue returns the values of the cells not on air.
func tissue(v []float64, air []bool) []float64 {
	var out []float64
	for k, x := range v {
		if !air[k] {
			out = append(out, x)
		}
	}
	return out
}

func meanRuns(ms []*Map) float64 {
	var s float64
	for _, mp := range ms {
		s += float64(mp.Runs + 1)
	}
	return s / float64(len(ms))
}
