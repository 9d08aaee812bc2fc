package preprocess

import (
	"fmt"
	"os"
	"testing"

	"github.com/midsag/midsag/internal/holdoutphantom"
	"github.com/midsag/midsag/phantom"
)

// holdoutCases returns n series of internal/holdoutphantom, the family
// held out from the picker (a Python generator written without reading
// the picker or the other two families), each with two labels for the
// harness: its scenario and its slice thickness.
func holdoutCases(t *testing.T, n int) (cases []evalCase, thickness []string, truths []holdoutphantom.Truth) {
	t.Helper()
	for _, c := range holdoutphantom.Generate(t, holdoutphantom.Options{N: n, Seed: 20261203}) {
		truths = append(truths, c.Truth)
		pf := make([]phantom.File, len(c.Files))
		for j, f := range c.Files {
			pf[j] = phantom.File{Name: f.Name, Data: f.Data}
		}
		ec := evalCase{scenario: c.Truth.Scenario, files: pf, target: c.Truth.SeriesInstanceUID}
		if c.Truth.InSlab {
			// The harness takes the slice's distance from the plane.
			ec.midline, ec.offsetMM = c.Truth.MidlineSOPInstanceUID, -c.Truth.SignedDistanceMM
		}
		cases = append(cases, ec)
		thickness = append(thickness, fmt.Sprintf("%.1f mm", c.Truth.ThicknessMM))
	}
	return cases, thickness, truths
}

// TestMidlineEvaluationHoldout measures the midline picker on the
// held-out family with the harness of midline_eval_test.go (exact,
// within one slice, flagged, refused, wrong and unflagged, the geometric
// centre as baseline), per scenario and per slice thickness. Nothing of
// the picker was tuned on this family. The family is deterministic (seed
// 20261203), so the floors are the rates measured on each sample (60 by
// default, 200 long, 28 short) when the family was added, less about two
// series, and the unflagged counts exactly as measured: they guard against regressions
// and say nothing of the goal (99% exact, no unflagged pick on a slab
// that misses the midline), which the picker does not reach here.
//
// Measured on main, 2026-12-03 (go test -tags openjpeg,charls -run
// Holdout -v ./preprocess), n = 60, after the slice-boundary flag was
// extended to picks that symmetry leads (slices.go, judge): of 41 in-slab
// series exact 58.5% (58.8% of the 17 whose plane lies within a quarter
// slice of a slice's centre), within one slice 90.2%, flagged 80.5%, 1
// wrong and unflagged (geometric centre 34.1% exact, 39.0% within one); of
// 19 slabs that miss the midline 68.4% refused, 31.6% flagged, none
// unflagged. With n = 200 (MIDSAG_LONG=1): of 131 exact 54.2% (66.7% of
// 63 clear of a boundary), within one 93.1%, flagged 79.4%, 2 wrong and
// unflagged (centre 33.6%, 44.3%); of 69 missing the midline 66.7%
// refused, 33.3% flagged, none unflagged. Before that flag and the
// obliquity flag, 25 of the 131 were wrong and unflagged; when the family
// was added, before the canal outline and density checks, 3 of the 19 (n
// = 60) and 5 of the 69 (n = 200) missing-midline slabs were unflagged.
func TestMidlineEvaluationHoldout(t *testing.T) {
	n, g := 60, goals{exact: 53, near: 85, missingUnflagged: 0, wrongUnflagged: 1}
	switch {
	case os.Getenv("MIDSAG_LONG") != "":
		n, g = 200, goals{exact: 52, near: 91, missingUnflagged: 0, wrongUnflagged: 2}
	case testing.Short():
		n, g = 28, goals{exact: 53, near: 95, missingUnflagged: 0, wrongUnflagged: 1}
	}
	cases, thickness, truths := holdoutCases(t, n)
	outs := runEval(cases)
	// Each miss, so a reader can regenerate the series (gen.py --first
	// CASE --n 1 --seed 20261203) and look at it.
	for i, o := range outs {
		tr := truths[i]
		if o.err != nil || o.refused != "" && o.inSlab || o.inSlab && o.diff == 0 || !o.inSlab && (o.refused != "" || o.flagged) {
			continue
		}
		t.Logf("case %d %s %.1f mm x %d (spacing %.2f): in slab %v, pick %+d slices, flagged %v, plane %+.2f mm from its nearest slice, offset %+.2f slices, yaw %+.1f roll %+.1f pitch %+.1f deg",
			tr.Case, tr.Scenario, tr.ThicknessMM, tr.Slices, tr.SpacingMM, o.inSlab, o.diff, o.flagged, tr.SignedDistanceMM, tr.OffsetSlices, tr.YawDeg, tr.RollDeg, tr.PitchDeg)
	}
	tl := reportEval(t, "holdout", outs)
	byThickness := make([]evalOutcome, len(outs))
	for i, o := range outs {
		o.scenario = thickness[i]
		byThickness[i] = o
	}
	reportEval(t, "holdout by thickness", byThickness)
	checkGoals(t, "holdout", tl, g)
}
