package preprocess

import (
	"bytes"
	"encoding/json"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/internal/testtool"
	"github.com/midsag/midsag/phantom"
)

// realdata returns the path of a file under the real DICOM samples
// (testdata/realdata, see internal/testtool.RealData).
func realdata(t *testing.T, rel string) string {
	t.Helper()
	p := filepath.Join(testtool.RealData(t), rel)
	if _, err := os.Stat(p); err != nil {
		t.Fatalf("real data file %s is missing: %v", p, err)
	}
	return p
}

// pydicomFrame is one frame as the pydicom script below reads it.
type pydicomFrame struct {
	IPP, IOP, Spacing      []float64
	TR, TE, Slope, Icpt    float64
	Thickness              float64
	Stack                  string
	InStack                int
	FrameType              []string
	Pix                    []float64 // stored values, when asked for
	HasIPP, HasIOP, HasPix bool
}

// pydicomFramesScript reads each frame's attributes with pydicom from the
// Shared and then the Per-frame Functional Groups (PS3.3 C.7.6.16: a
// per-frame macro overrides a shared one), falling back to the top-level
// attributes, and, when asked, the frame's stored values from
// ds.pixel_array.
const pydicomFramesScript = `import sys, json, pydicom
ds = pydicom.dcmread(sys.argv[1])
want_pix = sys.argv[2] == "1"
n = int(ds.get("NumberOfFrames", 1))
sh = ds.SharedFunctionalGroupsSequence[0] if "SharedFunctionalGroupsSequence" in ds else None
per = ds.PerFrameFunctionalGroupsSequence if "PerFrameFunctionalGroupsSequence" in ds else [None] * n
arr = ds.pixel_array if want_pix else None
def look(groups, seq, kw, default):
    v = default
    for g in groups:
        if g is not None and seq in g and kw in g[seq][0]:
            v = g[seq][0][kw].value
    return v
def fl(v):
    if v is None: return None
    return [float(x) for x in v] if isinstance(v, (list, pydicom.multival.MultiValue)) else float(v)
out = []
for i in range(n):
    gs = [sh, per[i]]
    ipp = look(gs, "PlanePositionSequence", "ImagePositionPatient", ds.get("ImagePositionPatient"))
    iop = look(gs, "PlaneOrientationSequence", "ImageOrientationPatient", ds.get("ImageOrientationPatient"))
    f = {
        "IPP": fl(ipp), "IOP": fl(iop), "HasIPP": ipp is not None, "HasIOP": iop is not None,
        "Spacing": fl(look(gs, "PixelMeasuresSequence", "PixelSpacing", ds.get("PixelSpacing"))),
        "Thickness": fl(look(gs, "PixelMeasuresSequence", "SliceThickness", ds.get("SliceThickness", 0))),
        "TR": fl(look(gs, "MRTimingAndRelatedParametersSequence", "RepetitionTime", ds.get("RepetitionTime", 0))),
        "TE": fl(look(gs, "MREchoSequence", "EffectiveEchoTime", ds.get("EchoTime", 0))),
        "Slope": fl(look(gs, "PixelValueTransformationSequence", "RescaleSlope", ds.get("RescaleSlope", 1))),
        "Icpt": fl(look(gs, "PixelValueTransformationSequence", "RescaleIntercept", ds.get("RescaleIntercept", 0))),
        "Stack": str(look(gs, "FrameContentSequence", "StackID", "")),
        "InStack": int(look(gs, "FrameContentSequence", "InStackPositionNumber", 0)),
        "FrameType": list(look(gs, "MRImageFrameTypeSequence", "FrameType", ds.ImageType)),
    }
    if want_pix:
        a = arr[i] if n > 1 else arr
        f["Pix"] = [float(x) for x in a.ravel()]
        f["HasPix"] = True
    out.append(f)
json.dump(out, sys.stdout)
`

func pydicomFrames(t *testing.T, path string, pix bool) []pydicomFrame {
	t.Helper()
	py := testtool.Python(t, "pydicom", "numpy")
	arg := "0"
	if pix {
		arg = "1"
	}
	out, err := exec.Command(py, "-c", pydicomFramesScript, path, arg).Output()
	if err != nil {
		t.Fatalf("pydicom on %s: %v", path, err)
	}
	var fs []pydicomFrame
	if err := json.Unmarshal(out, &fs); err != nil {
		t.Fatalf("pydicom output for %s: %v", path, err)
	}
	return fs
}

func near(a, b float64) bool { return math.Abs(a-b) <= 1e-6*math.Max(1, math.Abs(b)) }

func nearAll(a []float64, b []float64) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if !near(a[i], b[i]) {
			return false
		}
	}
	return true
}

// checkFramesAgainstPydicom compares every frame midsag makes of path
// with pydicom's reading of the same file: geometry, TR, TE, spacing,
// Stack ID, In-Stack Position, Frame Type and rescale; with pix, also the
// decoded values against pydicom's pixel_array times the frame's rescale
// (PS3.3 C.7.6.16.2.9, C.11.1.1.2).
func checkFramesAgainstPydicom(t *testing.T, path string, pix bool) []*midsag.Instance {
	t.Helper()
	src, err := readFile(t, New(Options{}), path)
	if err != nil {
		t.Fatalf("read %s: %v", path, err)
	}
	want := pydicomFrames(t, path, pix)
	frames := src.Frames()
	if len(want) != src.NumberOfFrames {
		t.Fatalf("%s: pydicom reads %d frames, Number of Frames is %d", path, len(want), src.NumberOfFrames)
	}
	for i, f := range frames {
		w := want[i]
		name := filepath.Base(path)
		if f.HasGeometry != (w.HasIPP && w.HasIOP) {
			t.Fatalf("%s frame %d: has geometry %v, pydicom %v/%v", name, i+1, f.HasGeometry, w.HasIPP, w.HasIOP)
		}
		if f.HasGeometry && (!nearAll(f.ImagePosition[:], w.IPP) || !nearAll(f.ImageOrientation[:], w.IOP)) {
			t.Fatalf("%s frame %d: IPP %v IOP %v, pydicom %v %v", name, i+1, f.ImagePosition, f.ImageOrientation, w.IPP, w.IOP)
		}
		if !near(f.RepetitionTime, w.TR) || !near(f.EchoTime, w.TE) || !near(f.SliceThickness, w.Thickness) {
			t.Fatalf("%s frame %d: TR %v TE %v thickness %v, pydicom %v %v %v", name, i+1, f.RepetitionTime, f.EchoTime, f.SliceThickness, w.TR, w.TE, w.Thickness)
		}
		if w.Spacing != nil && !nearAll(f.PixelSpacing[:], w.Spacing) {
			t.Fatalf("%s frame %d: pixel spacing %v, pydicom %v", name, i+1, f.PixelSpacing, w.Spacing)
		}
		if f.StackID != w.Stack || f.InStackPosition != w.InStack || strings.Join(f.ImageType, `\`) != strings.Join(w.FrameType, `\`) {
			t.Fatalf("%s frame %d: stack %q position %d type %v, pydicom %q %d %v", name, i+1, f.StackID, f.InStackPosition, f.ImageType, w.Stack, w.InStack, w.FrameType)
		}
		if !near(f.RescaleSlope, w.Slope) || !near(f.RescaleIntercept, w.Icpt) {
			t.Fatalf("%s frame %d: rescale %v %v, pydicom %v %v", name, i+1, f.RescaleSlope, f.RescaleIntercept, w.Slope, w.Icpt)
		}
		if !pix {
			continue
		}
		img, err := Decode(f)
		if err != nil {
			t.Fatalf("%s frame %d: decode: %v", name, i+1, err)
		}
		if len(img.Pix) != len(w.Pix) {
			t.Fatalf("%s frame %d: %d values, pydicom %d", name, i+1, len(img.Pix), len(w.Pix))
		}
		for k, v := range w.Pix {
			if e := v*w.Slope + w.Icpt; math.Abs(float64(img.Pix[k])-e) > 1e-4*math.Max(1, math.Abs(e)) {
				t.Fatalf("%s frame %d pixel %d: %v, pydicom %v", name, i+1, k, img.Pix[k], e)
			}
		}
	}
	return frames
}

// TestRealEnhancedMRFrames reads the real Enhanced MR files of the shared
// real data (dcm_qa_enh: Siemens XA10 and Philips; pydicom-data's
// emri_small in the syntaxes midsag decodes) and compares every frame with
// pydicom's reading and pixels. The files are not sagittal T2 spine, so
// the pick must refuse them with no_sagittal_t2_series, for the reasons
// named per file below.
func TestRealEnhancedMRFrames(t *testing.T) {
	cases := []struct {
		rel    string
		frames int
		// parts is how many series Group makes of the file;
		// reasons must each appear in some part's candidate reasons.
		parts   int
		reasons []string
	}{
		// Philips B0 map: 32 axial positions, each as a magnitude frame
		// (Frame Type ...\M, TE 1.52 ms) and a field-map frame (Frame
		// Type ...\FIELD_MAP, TE 0): two parts, both axial.
		{"vendor/dcm_qa_enh/In/Philips/IM_0027_fMAP.dcm", 64, 2, []string{"not sagittal"}},
		// Siemens XA10 resting-state EPI, one volume of 6 axial slices per
		// file (TR 500 ms, TE 30 ms): axial (TE 30 ms also makes it
		// not T2-weighted; the series rules name that in their own words).
		{"vendor/dcm_qa_enh/In/Siemens/XA10/6_1.dcm", 6, 1, []string{"not sagittal"}},
		// pydicom-data emri_small: 10 frames of a 3D T1 TFE, without
		// functional groups (the file is cut down), so no frame has a
		// plane (pydicom finds none either). Its frames are still decoded.
		{"codecs/pydicom-data/data_store/data/emri_small.dcm", 10, 1, []string{"no Image Orientation/Position (Patient)"}},
		{"codecs/pydicom-data/data_store/data/emri_small_big_endian.dcm", 10, 1, []string{"no Image Orientation/Position (Patient)"}},
		{"codecs/pydicom-data/data_store/data/emri_small_RLE.dcm", 10, 1, []string{"no Image Orientation/Position (Patient)"}},
	}
	for _, c := range cases {
		t.Run(filepath.Base(c.rel), func(t *testing.T) {
			path := realdata(t, c.rel)
			frames := checkFramesAgainstPydicom(t, path, true)
			if len(frames) != c.frames {
				t.Fatalf("%d frames, want %d", len(frames), c.frames)
			}
			src, err := readFile(t, New(Options{}), path)
			if err != nil {
				t.Fatal(err)
			}
			st := Group([]*midsag.Instance{src})[0]
			if len(st.Series) != c.parts {
				t.Fatalf("%d series parts, want %d", len(st.Series), c.parts)
			}
			_, cands, _, err := PickSeries(st, 3)
			if r, _ := midsag.ReasonOf(err); r != midsag.ReasonNoSagittalT2 {
				t.Fatalf("pick: %v, want %s", err, midsag.ReasonNoSagittalT2)
			}
			for _, cand := range cands {
				t.Logf("%q: %d slices, %v", cand.Description, cand.Instances, cand.Reasons)
			}
			for _, want := range c.reasons {
				for _, cand := range cands {
					if !strings.Contains(strings.Join(cand.Reasons, "; "), want) {
						t.Errorf("series %q: reasons %v lack %q", cand.Description, cand.Reasons, want)
					}
				}
			}
		})
	}
}

// TestRealEnhancedMRFourFiles groups the four Siemens XA10 files (four
// time points of one EPI series, each an Enhanced MR instance of the same
// 6 slices) into one series of 24 frames, and checks every file's frames
// against pydicom.
func TestRealEnhancedMRFourFiles(t *testing.T) {
	var insts []*midsag.Instance
	for _, n := range []string{"6_1.dcm", "6_2.dcm", "6_3.dcm", "6_4.dcm"} {
		path := realdata(t, "vendor/dcm_qa_enh/In/Siemens/XA10/"+n)
		checkFramesAgainstPydicom(t, path, false)
		in, err := readFile(t, New(Options{}), path)
		if err != nil {
			t.Fatal(err)
		}
		insts = append(insts, in)
	}
	st := Group(insts)[0]
	if len(st.Series) != 1 || len(st.Series[0].Instances) != 24 {
		t.Fatalf("%d series, first with %d slices; want 1 series of 24 frames", len(st.Series), len(st.Series[0].Instances))
	}
}

// TestOtherMultiFrameRefused: a multi-frame instance of a SOP Class other
// than Enhanced MR and Legacy Converted Enhanced MR is not read as slices,
// and the candidate says so. The file is pydicom's MR_small.dcm (MR Image
// Storage) with Number of Frames (0028,0008) set to 2 by DCMTK's dcmodify.
func TestOtherMultiFrameRefused(t *testing.T) {
	src := testtool.PydicomFile(t, "MR_small.dcm")
	mf := filepath.Join(t.TempDir(), "mf.dcm")
	testtool.Run(t, "dcmconv", src, mf)
	testtool.Run(t, "dcmodify", "-nb", "-i", "(0028,0008)=2", mf)
	in, err := readFile(t, New(Options{}), mf)
	if err != nil {
		t.Fatal(err)
	}
	st := Group([]*midsag.Instance{in})[0]
	if len(st.Series) != 1 || len(st.Series[0].Instances) != 1 {
		t.Fatalf("a multi-frame MR Image Storage instance was expanded: %d series", len(st.Series))
	}
	_, cands, _, err := PickSeries(st, 3)
	if r, _ := midsag.ReasonOf(err); r != midsag.ReasonNoSagittalT2 {
		t.Fatalf("pick: %v", err)
	}
	want := "multi-frame instances (2 frames) of SOP Class " + midsag.MRImageStorage + " are not read as slices"
	if !strings.Contains(strings.Join(cands[0].Reasons, "; "), want) {
		t.Errorf("reasons %v lack %q", cands[0].Reasons, want)
	}
}

// TestLegacyConvertedKeepsSequenceAttributes: a Legacy Converted Enhanced
// MR instance made by phantom.ToEnhancedMR carries the source images'
// Scanning Sequence, Sequence Variant, Sequence Name and MR Acquisition
// Type in Unassigned Shared Converted Attributes (PS3.3 C.7.6.16.2.25);
// midsag reads them as the single-frame source's.
func TestLegacyConvertedKeepsSequenceAttributes(t *testing.T) {
	files, truth, err := phantom.GenerateStudy(phantom.Options{Studies: 1, Seed: 3, Syntaxes: []string{midsag.ExplicitVRLittleEndian}, NoDecoys: true}, 0)
	if err != nil {
		t.Fatal(err)
	}
	var target []phantom.File
	var src *midsag.Instance
	for _, f := range files {
		in, err := New(Options{}).Read(f.Name, bytes.NewReader(f.Data))
		if err != nil {
			t.Fatal(err)
		}
		if in.SeriesInstanceUID == truth.TargetSeriesUID {
			target, src = append(target, f), in
		}
	}
	enh, err := phantom.ToEnhancedMR([][]phantom.File{target}, phantom.EnhancedOptions{SOPClassUID: midsag.LegacyConvertedEnhancedMRImageStorage})
	if err != nil {
		t.Fatal(err)
	}
	in, err := New(Options{}).Read(enh.Name, bytes.NewReader(enh.Data))
	if err != nil {
		t.Fatal(err)
	}
	fr := in.Frames()[0]
	if strings.Join(fr.ScanningSequence, `\`) != strings.Join(src.ScanningSequence, `\`) ||
		strings.Join(fr.SequenceVariant, `\`) != strings.Join(src.SequenceVariant, `\`) ||
		fr.SequenceName != src.SequenceName || fr.MRAcquisitionType != src.MRAcquisitionType ||
		fr.RepetitionTime != src.RepetitionTime || fr.EchoTime != src.EchoTime || fr.FlipAngle != src.FlipAngle {
		t.Errorf("legacy converted frame %+v\nsource %+v", fr, src)
	}
}
