package preprocess_test

import (
	"bytes"
	"context"
	"io"
	"math"
	"strings"
	"testing"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/explain"
	"github.com/midsag/midsag/internal/ortest"
	"github.com/midsag/midsag/models"
	"github.com/midsag/midsag/models/demo"
	"github.com/midsag/midsag/phantom"
	"github.com/midsag/midsag/preprocess"
)

func sources(files []phantom.File) []midsag.Source {
	out := make([]midsag.Source, len(files))
	for i, f := range files {
		f := f
		out[i] = midsag.Source{Name: f.Name, Open: func() (io.ReadCloser, error) { return io.NopCloser(bytes.NewReader(f.Data)), nil }}
	}
	return out
}

// bySeries splits a study's files into those of the given series and the
// rest, reading each file's Series Instance UID with midsag's reader.
func bySeries(t *testing.T, files []phantom.File, uids ...string) (in [][]phantom.File, rest []phantom.File) {
	t.Helper()
	pre := preprocess.New(preprocess.Options{})
	in = make([][]phantom.File, len(uids))
	for _, f := range files {
		inst, err := pre.Read(f.Name, bytes.NewReader(f.Data))
		if err != nil {
			t.Fatal(err)
		}
		k := -1
		for i, u := range uids {
			if inst.SeriesInstanceUID == u {
				k = i
			}
		}
		if k < 0 {
			rest = append(rest, f)
			continue
		}
		in[k] = append(in[k], f)
	}
	return in, rest
}

// TestEnhancedMRScoresLikeSingleFrame scores a phantom study (with its
// decoy series) as written, single-frame, and again with its T2 sagittal
// target converted by phantom.ToEnhancedMR into one Enhanced MR or Legacy
// Converted Enhanced MR instance: in stack order, shuffled, in RLE with
// each offset table, and as a two-stack file that also holds the T2 axial
// decoy. The converted files are checked against dciodvfy and pydicom in
// phantom's TestEnhancedMRConversion. Every variant must pick the same
// series, the same centre slice (by position along the normal) and stack,
// and give the same probability with the bundled demo model; the two-stack
// file must be split into its stacks, the axial one refused. The occlusion
// map's Secondary Capture must reference the centre frame by Referenced
// Frame Number (PS3.3 Table 10-3).
func TestEnhancedMRScoresLikeSingleFrame(t *testing.T) {
	ortest.Init(t)
	m, err := models.LoadBytes(demo.Name, demo.ONNX, nil, models.Options{IntraOpThreads: 1})
	if err != nil {
		t.Fatal(err)
	}
	defer m.Close()
	pre := preprocess.New(preprocess.Options{})
	p := &midsag.Pipeline{Pre: pre, Model: m}
	ctx := context.Background()

	files, truth, err := phantom.GenerateStudy(phantom.Options{Studies: 3, Seed: 11, Syntaxes: []string{midsag.ExplicitVRLittleEndian}}, 2)
	if err != nil {
		t.Fatal(err)
	}
	want, err := p.Run(ctx, sources(files))
	if err != nil {
		t.Fatal(err)
	}
	if want.SeriesInstanceUID != truth.TargetSeriesUID || want.CenterSOPInstanceUID != truth.CenterSOPInstanceUID {
		t.Fatalf("single-frame: series %s centre %s, truth %s %s", want.SeriesInstanceUID, want.CenterSOPInstanceUID, truth.TargetSeriesUID, truth.CenterSOPInstanceUID)
	}
	// The T2 axial decoy of this study has the target's 256 x 256 matrix
	// (TE 96.7 ms), so it can be the second stack.
	axUID := axialT2Decoy(t, want)
	parts, rest := bySeries(t, files, truth.TargetSeriesUID, axUID)
	occl := explain.New(explain.Options{PatchPX: 64, StridePX: 32, Mode: explain.ModeExhaustive})
	pw := *p
	pw.Explainer = occl
	wantExpl, err := pw.Run(ctx, sources(files))
	if err != nil {
		t.Fatal(err)
	}

	cases := []struct {
		name   string
		stacks [][]phantom.File
		o      phantom.EnhancedOptions
	}{
		{"enhanced", parts[:1], phantom.EnhancedOptions{}},
		{"enhanced shuffled", parts[:1], phantom.EnhancedOptions{Shuffle: 3}},
		{"legacy converted shuffled", parts[:1], phantom.EnhancedOptions{SOPClassUID: midsag.LegacyConvertedEnhancedMRImageStorage, Shuffle: 5}},
		{"rle basic offset table", parts[:1], phantom.EnhancedOptions{TransferSyntaxUID: midsag.RLELossless, Shuffle: 7, FragmentsPerFrame: 2}},
		{"rle extended offset table", parts[:1], phantom.EnhancedOptions{TransferSyntaxUID: midsag.RLELossless, OffsetTable: "extended", FragmentsPerFrame: 3}},
		{"rle one fragment per frame", parts[:1], phantom.EnhancedOptions{TransferSyntaxUID: midsag.RLELossless, OffsetTable: "none"}},
		{"two stacks", parts, phantom.EnhancedOptions{Shuffle: 9}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			enh, err := phantom.ToEnhancedMR(c.stacks, c.o)
			if err != nil {
				t.Fatal(err)
			}
			in := append([]phantom.File{enh}, rest...)
			if len(c.stacks) == 1 {
				in = append(in, parts[1]...)
			}
			pe := *p
			if c.name == "enhanced shuffled" {
				pe.Explainer = occl
			}
			got, err := pe.Run(ctx, sources(in))
			if err != nil {
				t.Fatal(err)
			}
			sameAsSingleFrame(t, got, want)
			checkParts(t, got, truth.TargetSeriesUID, len(c.stacks))
			if (pe.Explainer != nil) != (got.Explanation != nil) {
				t.Fatalf("explainer set %v, explanation %v", pe.Explainer != nil, got.Explanation != nil)
			}
			if got.Explanation != nil {
				checkFrameExplanation(t, got, wantExpl)
			}
		})
	}
}

// axialT2Decoy returns the study's T2 axial decoy series. It has the
// target's 256 x 256 matrix (TE 96.7 ms), so it can be a second stack.
func axialT2Decoy(t *testing.T, want *midsag.Result) string {
	t.Helper()
	for _, c := range want.SeriesCandidates {
		r := strings.Join(c.Reasons, " ")
		if strings.Contains(r, "not sagittal") && strings.Contains(r, "TE 97 ms") {
			return c.SeriesInstanceUID
		}
	}
	t.Fatalf("no axial T2 decoy among %+v", want.SeriesCandidates)
	return ""
}

// centreAndStack returns a result's centre slice and the positions of
// its stacked slices.
func centreAndStack(r *midsag.Result) (midsag.SliceScore, []float64) {
	var c midsag.SliceScore
	var stack []float64
	for _, s := range r.Slices {
		if s.SOPInstanceUID == r.CenterSOPInstanceUID && s.FrameNumber == r.CenterFrameNumber {
			c = s
		}
		if s.InStack {
			stack = append(stack, s.PositionMM)
		}
	}
	return c, stack
}

// sameAsSingleFrame checks that a multi-frame result has the
// single-frame result's series, output, centre, slices and stack, with
// every slice carrying its own frame number.
func sameAsSingleFrame(t *testing.T, got, want *midsag.Result) {
	t.Helper()
	gotC, gotStack := centreAndStack(got)
	wantC, wantStack := centreAndStack(want)
	if got.SeriesInstanceUID != want.SeriesInstanceUID || got.Probability != want.Probability || got.RawOutput != want.RawOutput {
		t.Errorf("series %s p %v raw %v; single-frame %s p %v raw %v", got.SeriesInstanceUID, got.Probability, got.RawOutput,
			want.SeriesInstanceUID, want.Probability, want.RawOutput)
	}
	if got.CenterFrameNumber < 1 || gotC.FrameNumber != got.CenterFrameNumber || math.Abs(gotC.PositionMM-wantC.PositionMM) > 1e-9 {
		t.Errorf("centre frame %d at %v mm; single-frame centre at %v mm", got.CenterFrameNumber, gotC.PositionMM, wantC.PositionMM)
	}
	if len(got.Slices) != len(want.Slices) || len(gotStack) != len(wantStack) {
		t.Fatalf("%d slices, stack %v; single-frame %d, %v", len(got.Slices), gotStack, len(want.Slices), wantStack)
	}
	seen := map[int]bool{}
	for i, s := range got.Slices {
		if s.FrameNumber < 1 || seen[s.FrameNumber] || math.Abs(s.PositionMM-want.Slices[i].PositionMM) > 1e-9 {
			t.Errorf("slice %d: frame %d at %v mm; single-frame at %v mm", i, s.FrameNumber, s.PositionMM, want.Slices[i].PositionMM)
		}
		seen[s.FrameNumber] = true
	}
	for i := range gotStack {
		if gotStack[i] != wantStack[i] {
			t.Errorf("stack positions %v, single-frame %v", gotStack, wantStack)
		}
	}
}

// checkParts checks how the target series' instance was split: one
// picked part, and with two stacks a second part refused as not sagittal
// that names its stack.
func checkParts(t *testing.T, got *midsag.Result, target string, stacks int) {
	t.Helper()
	var picked, axial int
	for _, cand := range got.SeriesCandidates {
		t.Logf("candidate %q: %d slices, picked %v", cand.Description, cand.Instances, cand.Picked)
		if cand.SeriesInstanceUID != target {
			continue
		}
		if cand.Picked {
			picked++
		}
		if strings.Contains(strings.Join(cand.Reasons, " "), "not sagittal") {
			axial++
			if !strings.Contains(cand.Description, "stack 2") {
				t.Errorf("split part %q does not name its stack", cand.Description)
			}
		}
	}
	// The axial decoy is angled block by block, so its stack splits
	// further by orientation: at least one part.
	if picked != 1 || (stacks == 1) != (axial == 0) {
		t.Errorf("target series parts: %d picked, %d refused as not sagittal; %d stacks", picked, axial, stacks)
	}
}

// checkFrameExplanation checks that a multi-frame result's map peaks
// where the single-frame one does, that it names the centre frame as its
// source, and that its Secondary Capture references the frame.
func checkFrameExplanation(t *testing.T, got, want *midsag.Result) {
	t.Helper()
	e := got.Explanation
	// The peak is placed on the centre frame's own plane.
	for k := range e.PeakPatientMM {
		if math.Abs(e.PeakPatientMM[k]-want.Explanation.PeakPatientMM[k]) > 1e-6 {
			t.Errorf("peak at %v mm, single-frame %v mm", e.PeakPatientMM, want.Explanation.PeakPatientMM)
		}
	}
	srcs := e.Picture.Sources
	if len(srcs) == 0 || srcs[0].SOPInstanceUID != got.CenterSOPInstanceUID || srcs[0].FrameNumber != got.CenterFrameNumber {
		t.Errorf("explanation sources %+v, centre %s frame %d", srcs, got.CenterSOPInstanceUID, got.CenterFrameNumber)
	}
	sc, err := explain.SecondaryCapture(got, explain.SCOptions{})
	if err != nil {
		t.Fatal(err)
	}
	// Referenced Frame Number (0008,1160), IS, in the Source Image
	// Sequence item of the centre frame.
	tagVR := []byte{0x08, 0x00, 0x60, 0x11, 'I', 'S'}
	if !bytes.Contains(sc, tagVR) {
		t.Errorf("the Secondary Capture has no Referenced Frame Number")
	}
}
