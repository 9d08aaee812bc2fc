package crossphantom

import (
	"bytes"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"testing"
)

// layoutTruth draws study i's truth without rendering.
func layoutTruth(t *testing.T, cfg Config, i int) Truth {
	t.Helper()
	pl, err := plan(cfg, i)
	if err != nil {
		t.Fatal(err)
	}
	_, tr, err := pl.emit(cfg, false)
	if err != nil {
		t.Fatal(err)
	}
	return tr
}

// TestTruthByConstruction checks, on 200 layouts, what each scenario
// promises: slices one spacing apart along the normal, the midline slice
// the nearest, lateral-only slabs missing the plane by two slices and
// 3 mm, partial series shorter than Images in Acquisition, both kinds of
// partial, centred and offset positions.
func TestTruthByConstruction(t *testing.T) {
	cfg := DefaultConfig(11)
	var c scenarioCounts
	for i := range 200 {
		tr := layoutTruth(t, cfg, i)
		checkSpacing(t, i, tr)
		minAbs := checkNearest(t, i, tr)
		checkScenario(t, i, tr, minAbs, &c)
		if tr.ThicknessMM < 1 || tr.ThicknessMM > 4 || tr.SliceCount < 3 || tr.SliceCount > 40 {
			t.Errorf("study %d: thickness %.1f, %d slices", i, tr.ThicknessMM, tr.SliceCount)
		}
	}
	if c.partialKept < 5 || c.partialLost < 5 || c.edge < 5 {
		t.Errorf("of 40 partial studies %d keep the midline and %d lose it; %d offset studies at the edge", c.partialKept, c.partialLost, c.edge)
	}
}

// scenarioCounts tallies the layouts TestTruthByConstruction wants to
// see at least a few of.
type scenarioCounts struct{ partialKept, partialLost, edge int }

// checkSpacing checks that the slices stand one spacing apart along the
// normal.
func checkSpacing(t *testing.T, i int, tr Truth) {
	t.Helper()
	d := tr.SliceDistanceMM
	if len(d) != tr.SliceCount || len(tr.SOPInstanceUIDs) != tr.SliceCount {
		t.Fatalf("study %d: %d distances, %d UIDs for %d slices", i, len(d), len(tr.SOPInstanceUIDs), tr.SliceCount)
	}
	for k := 1; k < len(d); k++ {
		if math.Abs(d[k]-d[k-1]-tr.SpacingMM) > 1e-9 {
			t.Fatalf("study %d: slices %d and %d are %.4f mm apart, spacing %.4f", i, k-1, k, d[k]-d[k-1], tr.SpacingMM)
		}
	}
}

// checkNearest checks that the truth's midline slice is the one nearest
// the plane, or that the plane lies outside the slab by the distance the
// truth gives; it returns the nearest slice's distance.
func checkNearest(t *testing.T, i int, tr Truth) float64 {
	t.Helper()
	d := tr.SliceDistanceMM
	nearest := 0
	for k := range d {
		if math.Abs(d[k]) < math.Abs(d[nearest]) {
			nearest = k
		}
	}
	minAbs := math.Abs(d[nearest])
	if tr.InSlab != (tr.MidlineIndex >= 0) || tr.InSlab != (minAbs <= tr.SpacingMM/2) {
		t.Fatalf("study %d: InSlab %v, index %d, nearest |d| %.3f, spacing %.3f", i, tr.InSlab, tr.MidlineIndex, minAbs, tr.SpacingMM)
	}
	if !tr.InSlab {
		if math.Abs(math.Abs(tr.MidlineDistanceMM)-(minAbs-tr.SpacingMM/2)) > 1e-9 {
			t.Fatalf("study %d: outside by %.3f, nearest slice %.3f", i, tr.MidlineDistanceMM, minAbs)
		}
		return minAbs
	}
	if tr.MidlineIndex != nearest || tr.MidlineSOPInstanceUID != tr.SOPInstanceUIDs[nearest] {
		t.Fatalf("study %d: midline %d, nearest %d", i, tr.MidlineIndex, nearest)
	}
	if math.Abs(tr.MidlineDistanceMM+d[nearest]) > 1e-9 {
		t.Fatalf("study %d: midline distance %.3f, slice distance %.3f", i, tr.MidlineDistanceMM, d[nearest])
	}
	// The scenarios keep the plane at least 0.15 slice from a tie.
	if minAbs > 0.36*tr.SpacingMM {
		t.Fatalf("study %d: plane %.3f mm from the nearest slice, spacing %.3f", i, minAbs, tr.SpacingMM)
	}
	return minAbs
}

// checkScenario checks what each scenario promises about where the
// midline lies and how many slices the slab keeps.
func checkScenario(t *testing.T, i int, tr Truth, minAbs float64, c *scenarioCounts) {
	t.Helper()
	n := tr.SliceCount
	switch tr.Scenario {
	case Centred:
		if !tr.InSlab || math.Abs(float64(tr.MidlineIndex)-float64(n-1)/2) > 1.5 {
			t.Errorf("study %d centred: midline %d of %d", i, tr.MidlineIndex, n)
		}
	case Offset:
		off := math.Abs(float64(tr.MidlineIndex) - float64(n-1)/2)
		fromEdge := min(tr.MidlineIndex, n-1-tr.MidlineIndex)
		if !tr.InSlab || !(fromEdge <= 2 || off >= 0.5 && off <= 6.5) {
			t.Errorf("study %d offset: midline %d of %d", i, tr.MidlineIndex, n)
		}
		if fromEdge <= 2 {
			c.edge++
		}
	case LateralOnly:
		if tr.InSlab || minAbs < 2*tr.SpacingMM || minAbs < 3 {
			t.Errorf("study %d lateral_only: nearest slice %.2f mm from the plane, spacing %.2f", i, minAbs, tr.SpacingMM)
		}
	case Partial:
		if tr.SliceCount >= tr.ImagesInAcquisition || tr.SliceCount < 3 {
			t.Errorf("study %d partial: %d of %d slices", i, tr.SliceCount, tr.ImagesInAcquisition)
		}
		if tr.InSlab {
			c.partialKept++
		} else {
			c.partialLost++
		}
	case Thick:
		if tr.ThicknessMM < 3 || tr.ThicknessMM > 4 || !tr.InSlab {
			t.Errorf("study %d thick: %.1f mm, in slab %v", i, tr.ThicknessMM, tr.InSlab)
		}
	}
	if tr.Scenario != Partial && tr.SliceCount != tr.ImagesInAcquisition {
		t.Errorf("study %d %s: %d of %d slices", i, tr.Scenario, tr.SliceCount, tr.ImagesInAcquisition)
	}
}

// TestDefaultConfigBalanced checks DefaultConfig's promise: 20
// consecutive studies hold every scenario in every thickness band once.
func TestDefaultConfigBalanced(t *testing.T) {
	cfg := DefaultConfig(5)
	seen := map[Scenario]map[float64]int{}
	for i := range 20 {
		tr := layoutTruth(t, cfg, i)
		if seen[tr.Scenario] == nil {
			seen[tr.Scenario] = map[float64]int{}
		}
		seen[tr.Scenario][math.Floor(tr.ThicknessMM)]++
	}
	for _, sc := range Scenarios() {
		got := seen[sc]
		if sc == Thick {
			if got[3] != 2 || got[4] != 2 {
				t.Errorf("thick bands: %v", got)
			}
			continue
		}
		if got[1] != 1 || got[2] != 1 || got[3] != 1 || got[4] != 1 {
			t.Errorf("%s bands: %v", sc, got)
		}
	}
}

// TestDeterministic checks that a study is a function of (seed, index)
// alone.
func TestDeterministic(t *testing.T) {
	cfg := DefaultConfig(9)
	cfg.DistractorRate = 1
	a, ta, err := Study(cfg, 4)
	if err != nil {
		t.Fatal(err)
	}
	b, tb, err := Study(cfg, 4)
	if err != nil {
		t.Fatal(err)
	}
	if len(a) != len(b) || ta.SeriesInstanceUID != tb.SeriesInstanceUID {
		t.Fatalf("%d and %d files", len(a), len(b))
	}
	for i := range a {
		if a[i].Name != b[i].Name || !bytes.Equal(a[i].Data, b[i].Data) {
			t.Fatalf("file %d differs", i)
		}
	}
	_, tc, err := Study(cfg, 5)
	if err != nil {
		t.Fatal(err)
	}
	if tc.StudyInstanceUID == ta.StudyInstanceUID {
		t.Fatal("studies 4 and 5 share a Study Instance UID")
	}
	if len(ta.Distractors) != ta.ImagesInAcquisition+10 {
		t.Fatalf("%d distractor instances for %d acquired slices", len(ta.Distractors), ta.ImagesInAcquisition)
	}
	if len(a) != ta.SliceCount+len(ta.Distractors) {
		t.Fatalf("%d files, %d slices and %d distractors", len(a), ta.SliceCount, len(ta.Distractors))
	}
}

// TestMidlinePlaneFit checks the least-squares fit: with no lateral
// curve the cord centreline lies in the neck's own midsagittal plane, so
// the fit must return that plane's normal, the rotated u axis.
func TestMidlinePlaneFit(t *testing.T) {
	pl, err := plan(DefaultConfig(2), 7)
	if err != nil {
		t.Fatal(err)
	}
	nk := pl.nk
	for i := range nk.hs {
		nk.hs[i].lat = 0
	}
	var pts []vec
	for w := nk.bot[6]; w <= nk.c2top; w += 2 {
		pts = append(pts, nk.rot.apply(nk.cordCentre(w)).add(nk.origin))
	}
	p := fitMidline(pts)
	want := nk.rot.col(0)
	if got := vec(p.Normal); got.sub(want).norm() > 1e-9 {
		t.Fatalf("normal %v, want %v", got, want)
	}
	for _, q := range pts {
		if d := q.sub(vec(p.Point)).dot(vec(p.Normal)); math.Abs(d) > 1e-9 {
			t.Fatalf("centreline point %.3f mm off the plane", d)
		}
	}
}

// TestMidlineAnatomy checks the anatomy the truth plane stands for: on
// the cord centreline the tissue is cord, flanked by CSF, the spinous
// processes' bone lies within 4.5 mm of the midline, and 10 mm lateral
// of the cord there is neither cord nor a spinous process.
func TestMidlineAnatomy(t *testing.T) {
	for study := range 10 {
		pl, err := plan(DefaultConfig(4), study)
		if err != nil {
			t.Fatal(err)
		}
		nk := pl.nk
		cord, lateralCord, spinous := 0, 0, 0
		for w := nk.bot[6]; w <= nk.c2top; w++ {
			c := nk.cordCentre(w)
			if nk.tissueAt(c[0], c[1], c[2]) == tCord {
				cord++
			}
			if tt := nk.tissueAt(c[0]+10, c[1], c[2]); tt == tCord {
				lateralCord++
			}
			for v := nk.canP + 3; v < nk.canP+20; v++ {
				if tt := nk.tissueAt(c[0], v, w); tt == tCortex || tt == tMarrow {
					spinous++
					break
				}
			}
		}
		n := int(nk.c2top - nk.bot[6])
		if cord < n*9/10 || lateralCord > 0 || spinous < n/4 {
			t.Errorf("study %d: cord at %d of %d heights, lateral cord %d, spinous bone at %d", study, cord, n, lateralCord, spinous)
		}
	}
}

// TestWrite checks that Write lays studies out as folders with a
// truth.json that reads back as the truths it returned.
func TestWrite(t *testing.T) {
	dir := t.TempDir()
	cfg := DefaultConfig(8)
	cfg.Scenarios = []Scenario{LateralOnly}
	got, err := Write(dir, cfg, 2)
	if err != nil {
		t.Fatal(err)
	}
	b, err := os.ReadFile(filepath.Join(dir, "truth.json"))
	if err != nil {
		t.Fatal(err)
	}
	var back []Truth
	if err := json.Unmarshal(b, &back); err != nil {
		t.Fatal(err)
	}
	for i, tr := range back {
		files, err := filepath.Glob(filepath.Join(dir, fmt.Sprintf("study%04d", i), "*", "*.dcm"))
		if err != nil {
			t.Fatal(err)
		}
		if tr.SeriesInstanceUID != got[i].SeriesInstanceUID || len(files) != tr.SliceCount+len(tr.Distractors) || tr.InSlab {
			t.Errorf("study %d: %d files for %d slices and %d distractors; in slab %v", i, len(files), tr.SliceCount, len(tr.Distractors), tr.InSlab)
		}
	}
}

// BenchmarkStudy measures generating one rendered study of the default
// family (20 consecutive indices, so every scenario and band).
func BenchmarkStudy(b *testing.B) {
	cfg := DefaultConfig(1)
	cfg.DistractorRate = 0
	slices := 0
	for i := 0; b.Loop(); i++ {
		_, tr, err := Study(cfg, i%20)
		if err != nil {
			b.Fatal(err)
		}
		slices += tr.SliceCount
	}
	b.ReportMetric(float64(slices)/float64(b.N), "slices/op")
	b.ReportMetric(float64(b.Elapsed().Milliseconds())/float64(slices)*20, "ms/20slices")
}
