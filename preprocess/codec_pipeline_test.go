package preprocess

import (
	"context"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/internal/ortest"
	"github.com/midsag/midsag/internal/testtool"
	"github.com/midsag/midsag/models"
	"github.com/midsag/midsag/models/demo"
	"github.com/midsag/midsag/phantom"
	"github.com/midsag/midsag/preprocess/codec"
)

// TestCodecReencodedStudyScoresSame re-encodes one phantom study, file by
// file, with GDCM's `gdcmconv --j2k` and `gdcmconv --jpegls` and DCMTK's
// `dcmcjpls` (all lossless by default) and scores each copy with the
// Pipeline and the bundled demo model: the picked series, the centre
// slice and the probability must equal the uncompressed original's.
func TestCodecReencodedStudyScoresSame(t *testing.T) {
	needCodec(t, codec.JPEG2000Built, codec.JPEG2000Library)
	needCodec(t, codec.JPEGLSBuilt, codec.JPEGLSLibrary)
	gdcm := testtool.GDCMConv(t)
	dcmcjpls := testtool.Command(t, "dcmcjpls")
	ortest.Init(t)
	m, err := models.LoadBytes(demo.Name, demo.ONNX, nil, models.Options{IntraOpThreads: 1})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { m.Close() })
	files, truth, err := phantom.GenerateStudy(phantom.Options{Seed: 11, Syntaxes: []string{midsag.ExplicitVRLittleEndian}}, 0)
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	orig := filepath.Join(dir, "orig")
	var names []string
	for _, f := range files {
		testtool.WriteFile(t, orig, f.Name, f.Data)
		names = append(names, f.Name)
	}
	score := func(folder string) *midsag.Result {
		t.Helper()
		var srcs []midsag.Source
		for _, n := range names {
			p := filepath.Join(folder, n)
			srcs = append(srcs, midsag.Source{Name: n, Open: func() (io.ReadCloser, error) { return os.Open(p) }})
		}
		p := &midsag.Pipeline{Pre: New(Options{}), Model: m}
		res, err := p.Run(context.Background(), srcs)
		if err != nil {
			t.Fatalf("%s: %v", folder, err)
		}
		return res
	}
	want := score(orig)
	if want.CenterSOPInstanceUID != truth.CenterSOPInstanceUID {
		t.Logf("original's centre %s, phantom truth %s", want.CenterSOPInstanceUID, truth.CenterSOPInstanceUID)
	}
	for _, enc := range []struct {
		name string
		cmd  []string
		ts   string
	}{
		{"gdcmconv --j2k", []string{gdcm, "--j2k"}, midsag.JPEG2000Lossless},
		{"gdcmconv --jpegls", []string{gdcm, "--jpegls"}, midsag.JPEGLSLossless},
		{"dcmcjpls", []string{dcmcjpls}, midsag.JPEGLSLossless},
	} {
		out := filepath.Join(dir, strings.ReplaceAll(enc.name, " ", ""))
		for _, n := range names {
			dst := filepath.Join(out, n)
			if err := os.MkdirAll(filepath.Dir(dst), 0o755); err != nil {
				t.Fatal(err)
			}
			args := append(append([]string{}, enc.cmd[1:]...), filepath.Join(orig, n), dst)
			if b, err := exec.Command(enc.cmd[0], args...).CombinedOutput(); err != nil {
				t.Fatalf("%s %s: %v\n%s", enc.name, n, err, b)
			}
		}
		inst, err := readFile(t, New(Options{}), filepath.Join(out, names[0]))
		if err != nil || inst.TransferSyntaxUID != enc.ts {
			t.Fatalf("%s wrote %v (%v), want %s", enc.name, inst, err, enc.ts)
		}
		got := score(out)
		if got.SeriesInstanceUID != want.SeriesInstanceUID || got.CenterSOPInstanceUID != want.CenterSOPInstanceUID ||
			got.Probability != want.Probability || got.CalibratedProb != want.CalibratedProb {
			t.Errorf("%s: series %s centre %s p %v (calibrated %v); original %s %s %v (%v)", enc.name,
				got.SeriesInstanceUID, got.CenterSOPInstanceUID, got.Probability, got.CalibratedProb,
				want.SeriesInstanceUID, want.CenterSOPInstanceUID, want.Probability, want.CalibratedProb)
		}
	}
	t.Logf("%d files; series %s, centre %s, probability %v in all four encodings", len(names), want.SeriesInstanceUID, want.CenterSOPInstanceUID, want.Probability)
}
