package main

import (
	"flag"

	"github.com/midsag/midsag/explain"
)

// explainFlags are the occlusion-map flags shared by score and serve.
type explainFlags struct {
	baseline string
	mode     string
	maxRuns  int
}

func (e *explainFlags) register(fs *flag.FlagSet) {
	fs.StringVar(&e.baseline, "explain-baseline", explain.BaselineMean, "what an occluded patch is replaced by: mean, zero or blur")
	fs.StringVar(&e.mode, "explain-mode", explain.DefaultMode,
		"which patches are occluded: sparse (a lattice of every other cell, the rest interpolated, the highest of those occluded; at most a quarter of the runs), exhaustive (every cell) or coarse_to_fine")
	fs.IntVar(&e.maxRuns, "explain-max-runs", 0, "sparse mode: most occluded model runs, lattice included (0 = a quarter of the grid less one, -1 = no cap)")
}

// options checks the flags and returns the explain options they ask for;
// a bad value is a usage error.
func (e *explainFlags) options() (explain.Options, error) {
	switch e.baseline {
	case explain.BaselineMean, explain.BaselineZero, explain.BaselineBlur:
	default:
		return explain.Options{}, usagef("--explain-baseline %q: use mean, zero or blur", e.baseline)
	}
	switch e.mode {
	case explain.ModeSparse, explain.ModeExhaustive, explain.ModeCoarseToFine:
	default:
		return explain.Options{}, usagef("--explain-mode %q: use sparse, exhaustive or coarse_to_fine", e.mode)
	}
	if e.maxRuns < -1 {
		return explain.Options{}, usagef("--explain-max-runs %d: use a positive count, 0 for the default or -1 for no cap", e.maxRuns)
	}
	return explain.Options{Baseline: e.baseline, Mode: e.mode, MaxRuns: e.maxRuns}, nil
}
