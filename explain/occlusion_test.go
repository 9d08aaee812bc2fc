package explain

import (
	"context"
	"math"
	"path/filepath"
	"slices"
	"testing"

	"github.com/midsag/midsag"
)

// TestLinearModelDropIsAnalytic checks the occlusion drops of linear.onnx
// (made by torch, testdata/make_linear.py) against the analytic value.
// Zeiler and Fergus 2014 define a patch's value as the change in output
// when it is occluded; for f(x) = w·x + b that change is exactly the sum
// over the patch, in every slice, of w × (x − baseline).
func TestLinearModelDropIsAnalytic(t *testing.T) {
	needORT(t)
	m := loadModel(t, filepath.Join("testdata", "linear.onnx"))
	w, bias := linearWeights(t)
	in := randomInput(32, 32)
	var want0 float64
	for i, x := range in.Data {
		want0 += float64(w[i]) * float64(x)
	}
	raw := predictOne(t, m, in)
	if math.Abs(raw-(want0+float64(bias))) > 1e-3 {
		t.Fatalf("unoccluded output %.6f, torch weights give %.6f", raw, want0+float64(bias))
	}
	for _, bl := range []string{BaselineMean, BaselineZero, BaselineBlur} {
		// levels 0 stands for the sparse mode here.
		for _, levels := range []int{1, 3, 0} {
			mode := map[int]string{1: ModeExhaustive, 3: ModeCoarseToFine, 0: ModeSparse}[levels]
			o := New(Options{Baseline: bl, Mode: mode, Levels: max(levels, 1), AirFraction: -1, BatchSize: 5})
			mp, err := o.Compute(context.Background(), m, in, raw)
			if err != nil {
				t.Fatal(err)
			}
			base := baseline(in.Data, layout{c: 3, h: 32, w: 32}, Options{Baseline: bl, PatchPX: mp.PatchPX})
			checked := 0
			for _, p := range mp.Patches {
				if !p.Run || p.Interpolated {
					continue
				}
				var want float64
				for c := 0; c < 3; c++ {
					for y := p.Y0; y < p.Y1; y++ {
						for x := p.X0; x < p.X1; x++ {
							i := (c*32+y)*32 + x
							want += float64(w[i]) * (float64(in.Data[i]) - float64(base[i]))
						}
					}
				}
				if math.Abs(p.DropRaw-want) > 1e-3 {
					t.Errorf("%s levels %d patch %+v: drop %.6f, analytic %.6f", bl, levels, p, p.DropRaw, want)
				}
				if wp := sigmoid(raw) - sigmoid(raw-want); math.Abs(p.DropProb-wp) > 1e-5 {
					t.Errorf("%s levels %d patch %+v: probability drop %.6f, analytic %.6f", bl, levels, p, p.DropProb, wp)
				}
				checked++
			}
			if levels == 1 && (checked != 16*16 || mp.Runs != checked) {
				t.Errorf("%s exhaustive: %d patches checked, %d runs, want 256", bl, checked, mp.Runs)
			}
			// No air here, so the sparse lattice alone is 9 x 9 cells.
			if levels == 0 && (checked != mp.Runs || mp.Runs != 81) {
				t.Errorf("%s sparse: %d patches checked, %d runs", bl, checked, mp.Runs)
			}
			if levels == 3 && mp.Runs >= 256 {
				t.Errorf("%s coarse to fine ran %d patches, no fewer than exhaustive", bl, mp.Runs)
			}
		}
	}
}

// sigmoid is the logistic function, the identity calibrator's input
// mapping for a logit output.
func sigmoid(z float64) float64 { return 1 / (1 + math.Exp(-z)) }

// TestAirPatchesAreNotRun checks that patches wholly on the zero (air)
// quarter of the input are skipped with a zero drop, and the rest run.
func TestAirPatchesAreNotRun(t *testing.T) {
	needORT(t)
	m := loadModel(t, filepath.Join("testdata", "linear.onnx"))
	in := randomInput(32, 32)
	raw := predictOne(t, m, in)
	mp, err := New(Options{Mode: ModeExhaustive}).Compute(context.Background(), m, in, raw)
	if err != nil {
		t.Fatal(err)
	}
	skipped := 0
	for _, p := range mp.Patches {
		onAir := p.X1 <= 8
		if p.Run == onAir {
			t.Errorf("patch %+v: run %v but wholly on air %v", p, p.Run, onAir)
		}
		if !p.Run {
			skipped++
			if p.DropRaw != 0 {
				t.Errorf("skipped patch %+v has drop %g", p, p.DropRaw)
			}
		}
	}
	// At 32 px the finest patch is 4 px at stride 2: grid column j covers
	// columns 2j-1 to 2j+2, so j = 0, 1, 2 lie wholly in x < 8.
	if skipped != 3*16 || mp.Runs != 256-3*16 {
		t.Errorf("skipped %d patches and ran %d, want 48 and 208", skipped, mp.Runs)
	}
}

// TestDeterministic checks that the same input gives the same map, run
// after run and with any number of workers.
func TestDeterministic(t *testing.T) {
	needORT(t)
	m := loadModel(t, filepath.Join("testdata", "linear.onnx"))
	in := randomInput(32, 32)
	raw := predictOne(t, m, in)
	for _, mode := range []string{ModeSparse, ModeExhaustive, ModeCoarseToFine} {
		var first *Map
		for _, workers := range []int{1, 1, 2, 3, 8} {
			mp, err := New(Options{Mode: mode, Workers: workers, BatchSize: 4}).Compute(context.Background(), m, in, raw)
			if err != nil {
				t.Fatal(err)
			}
			if first == nil {
				first = mp
				continue
			}
			if !slices.Equal(mp.Values, first.Values) || !slices.Equal(mp.RawValues, first.RawValues) || !slices.Equal(mp.Pixels, first.Pixels) || mp.Runs != first.Runs {
				t.Errorf("%s, workers %d: map differs from the first run", mode, workers)
			}
		}
	}
}

// runnerModel is a midsag.Model stand-in that reports a fixed batch and
// its concurrency, as models.Model does.
type runnerModel struct {
	midsag.Model
	fixed bool
	conc  int
}

func (r runnerModel) FixedBatch() bool { return r.fixed }
func (r runnerModel) Concurrency() int { return r.conc }

// TestOptionsForModel: runs spread over the model's runners, one input per
// call for a fixed-batch model; options set by the caller are kept.
func TestOptionsForModel(t *testing.T) {
	o := Options{}.forModel(runnerModel{fixed: true, conc: 3})
	if o.BatchSize != 1 || o.Workers != 3 {
		t.Errorf("fixed batch, 3 runners: batch %d, workers %d; want 1 and 3", o.BatchSize, o.Workers)
	}
	o = Options{}.forModel(runnerModel{conc: 2})
	if o.BatchSize != 0 || o.Workers != 2 {
		t.Errorf("dynamic batch, 2 runners: batch %d, workers %d; want 0 (the default) and 2", o.BatchSize, o.Workers)
	}
	o = Options{BatchSize: 5, Workers: 4}.forModel(runnerModel{fixed: true, conc: 1})
	if o.BatchSize != 5 || o.Workers != 4 {
		t.Errorf("explicit options changed to batch %d, workers %d", o.BatchSize, o.Workers)
	}
}
