package explain

import (
	"bytes"
	"context"
	"image/png"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"github.com/midsag/midsag/internal/testtool"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/preprocess"
)

// explainedPhantom scores phantom positive study 3 of seed 4242 with the
// demo model and an exhaustive occlusion map.
func explainedPhantom(t testing.TB) *midsag.Result {
	t.Helper()
	m := demoModel(t)
	c := phantomCases(t, m, 4242, 4)[3]
	p := &midsag.Pipeline{Pre: preprocess.New(preprocess.Options{}), Model: m, Explainer: New(Options{})}
	res, err := p.Score(context.Background(), c.instances)
	if err != nil {
		t.Fatal(err)
	}
	return res
}

// TestHeatmapPNG checks the picture decodes as PNG at the expected size
// and that its legend bar runs viridis's end points (matplotlib 3.6.3
// _cm_listed.py: entry 0 is (0.267004, 0.004874, 0.329415), entry 255 is
// (0.993248, 0.906157, 0.143936)). MIDSAG_HEATMAP_OUT writes the PNG out
// for a look.
func TestHeatmapPNG(t *testing.T) {
	res := explainedPhantom(t)
	b, err := Heatmap(res)
	if err != nil {
		t.Fatal(err)
	}
	img, err := png.Decode(bytes.NewReader(b))
	if err != nil {
		t.Fatal(err)
	}
	if w := img.Bounds().Dx(); w != margin+512+margin+legendWidth {
		t.Errorf("width %d", w)
	}
	bx, top := margin+512+margin+5, margin+lineHeight
	r, g, bl, _ := img.At(bx, top).RGBA()
	if r>>8 != 253 || g>>8 != 231 || bl>>8 != 37 {
		t.Errorf("legend top is (%d,%d,%d), want viridis 255 = (253,231,37)", r>>8, g>>8, bl>>8)
	}
	r, g, bl, _ = img.At(bx, top+511).RGBA()
	if r>>8 != 68 || g>>8 != 1 || bl>>8 != 84 {
		t.Errorf("legend bottom is (%d,%d,%d), want viridis 0 = (68,1,84)", r>>8, g>>8, bl>>8)
	}
	if out := os.Getenv("MIDSAG_HEATMAP_OUT"); out != "" {
		if err := os.WriteFile(out, b, 0o644); err != nil {
			t.Fatal(err)
		}
	}
}

// TestSecondaryCaptureVerifies writes the heatmap as a Secondary Capture
// and runs dicom3tools' dciodvfy on it, the outside reference for the SC
// Image IOD (PS3.3 A.8.1): no line may say "Error". dcmdump (DCMTK) then
// must find the notice, the study and the source images.
func TestSecondaryCaptureVerifies(t *testing.T) {
	res := explainedPhantom(t)
	b, err := SecondaryCapture(res, SCOptions{})
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "heatmap.dcm")
	if err := os.WriteFile(path, b, 0o644); err != nil {
		t.Fatal(err)
	}
	out, _ := exec.Command(testtool.Command(t, "dciodvfy"), path).CombinedOutput()
	for _, l := range strings.Split(string(out), "\n") {
		if strings.Contains(l, "Error") {
			t.Errorf("dciodvfy: %s", l)
		}
	}
	if !strings.Contains(string(out), "SCImage") {
		t.Errorf("dciodvfy did not take it for a Secondary Capture image:\n%s", out)
	}
	dump := string(testtool.Run(t, "dcmdump", "+L", path))
	for _, want := range []string{"RESEARCH USE ONLY", res.StudyInstanceUID, res.CenterSOPInstanceUID, "MIDSAG OCCLUSION MAP (RESEARCH)", "(0020,0011) IS [9901]", "RGB"} {
		if !strings.Contains(dump, want) {
			t.Errorf("dcmdump lacks %q", want)
		}
	}
}
