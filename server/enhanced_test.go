package server

import (
	"bytes"
	"context"
	"io"
	"testing"
	"time"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/phantom"
	"github.com/midsag/midsag/preprocess"
)

// TestCoreScoresEnhancedMR ingests a study whose T2 sagittal target is
// one Enhanced MR instance (phantom.ToEnhancedMR, frames shuffled): ingest
// reads headers only (ReadHeader) and the worker reads the spooled file
// again, so the frames must survive both paths. The result must equal a
// direct Pipeline run on the single-frame original: same probability, and
// a centre frame at the original centre slice's position.
func TestCoreScoresEnhancedMR(t *testing.T) {
	c, _, stop := newCore(t, t.TempDir(), time.Hour)
	defer stop()
	opts := phantom.Options{Studies: 1, Seed: 9, Syntaxes: []string{midsag.ExplicitVRLittleEndian}}
	files, truth, err := phantom.GenerateStudy(opts, 0)
	if err != nil {
		t.Fatal(err)
	}
	pre := preprocess.New(preprocess.Options{})
	var target, rest []phantom.File
	var srcs []midsag.Source
	for _, f := range files {
		f := f
		in, err := pre.Read(f.Name, bytes.NewReader(f.Data))
		if err != nil {
			t.Fatal(err)
		}
		if in.SeriesInstanceUID == truth.TargetSeriesUID {
			target = append(target, f)
		} else {
			rest = append(rest, f)
		}
		srcs = append(srcs, midsag.Source{Name: f.Name, Open: func() (io.ReadCloser, error) { return io.NopCloser(bytes.NewReader(f.Data)), nil }})
	}
	m, release, err := c.cfg.Registry.Acquire("", "")
	if err != nil {
		t.Fatal(err)
	}
	want, err := (&midsag.Pipeline{Pre: pre, Model: m}).Run(context.Background(), srcs)
	release()
	if err != nil {
		t.Fatal(err)
	}
	enh, err := phantom.ToEnhancedMR([][]phantom.File{target}, phantom.EnhancedOptions{Shuffle: 4})
	if err != nil {
		t.Fatal(err)
	}
	uids := ingestAll(t, c, append([]phantom.File{enh}, rest...))
	_, res := scoreDone(t, c, uids)
	pos := func(r *midsag.Result) float64 {
		for _, s := range r.Slices {
			if s.SOPInstanceUID == r.CenterSOPInstanceUID && s.FrameNumber == r.CenterFrameNumber {
				return s.PositionMM
			}
		}
		return -1e9
	}
	if res.SeriesInstanceUID != want.SeriesInstanceUID || res.Probability != want.Probability ||
		res.CenterFrameNumber < 1 || pos(res) != pos(want) {
		t.Errorf("enhanced: series %s p %v centre frame %d at %v mm; single-frame %s p %v at %v mm",
			res.SeriesInstanceUID, res.Probability, res.CenterFrameNumber, pos(res), want.SeriesInstanceUID, want.Probability, pos(want))
	}
}
