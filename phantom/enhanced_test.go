package phantom

import (
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/internal/testtool"
)

// seriesFiles returns the study's files of one series, by Series Instance
// UID (0020,000E).
func seriesFiles(t *testing.T, files []File, uid string) []File {
	t.Helper()
	var out []File
	for _, f := range files {
		im, err := readSimple(f.Data)
		if err != nil {
			t.Fatalf("%s: %v", f.Name, err)
		}
		if im.str(0x0020000E) == uid {
			out = append(out, f)
		}
	}
	if len(out) == 0 {
		t.Fatalf("no file of series %s", uid)
	}
	return out
}

// seriesUIDByTE returns the Series Instance UID of the first series whose
// Echo Time (0018,0081) and matrix match.
func seriesUIDByTE(t *testing.T, files []File, te float64, rows int) string {
	t.Helper()
	for _, f := range files {
		im, err := readSimple(f.Data)
		if err != nil {
			t.Fatal(err)
		}
		if math.Abs(im.float(0x00180081)-te) < 1e-6 && int(im.u16(0x00280010)) == rows {
			return im.str(0x0020000E)
		}
	}
	t.Fatalf("no series with TE %v", te)
	return ""
}

// pydicomEnhancedScript prints, per frame, what pydicom reads from the
// Per-frame and Shared Functional Groups: Stack ID, In-Stack Position
// Number, Image Position and Orientation (Patient) and the frame's pixels
// from ds.pixel_array as a SHA-256 of their little-endian words (pydicom
// decodes RLE and finds the frames itself).
const pydicomEnhancedScript = `import sys, json, hashlib, pydicom
ds = pydicom.dcmread(sys.argv[1])
sh = ds.SharedFunctionalGroupsSequence[0]
arr = ds.pixel_array
out = []
for i, p in enumerate(ds.PerFrameFunctionalGroupsSequence):
    def get(seq, kw):
        g = p if seq in p else sh
        return g[seq][0][kw].value
    fc = p.FrameContentSequence[0]
    out.append({"stack": str(fc.StackID), "pos": int(fc.InStackPositionNumber),
        "ipp": [float(x) for x in get("PlanePositionSequence", "ImagePositionPatient")],
        "iop": [float(x) for x in get("PlaneOrientationSequence", "ImageOrientationPatient")],
        "sha": hashlib.sha256(arr[i].astype("<u2").tobytes()).hexdigest()})
json.dump(out, sys.stdout)
`

// TestEnhancedMRConversion converts phantom series into Enhanced MR and
// Legacy Converted Enhanced MR instances in several frame orders, syntaxes
// and offset tables, and checks each against outside references:
// dicom3tools' dciodvfy must report no Error for the IOD (PS3.3 A.36.2,
// A.71), and pydicom must read every frame's Stack ID, In-Stack Position
// Number, plane and pixels as those of the source image it came from,
// with In-Stack Position counting along the slice normal (PS3.3
// C.7.6.16.2.2.4). Frames split over several fragments are decoded by
// DCMTK's dcmdrle before pydicom reads them.
func TestEnhancedMRConversion(t *testing.T) {
	dciodvfy := testtool.Command(t, "dciodvfy")
	py := testtool.Python(t, "pydicom", "numpy")
	// Study 2 of seed 11 has a 256 x 256 T2 sagittal target and a 256 x
	// 256 T2 axial decoy (TE 96.7 ms), so the two can share one file.
	files, truth, err := GenerateStudy(Options{Studies: 3, Seed: 11, Syntaxes: []string{midsag.ExplicitVRLittleEndian}}, 2)
	if err != nil {
		t.Fatal(err)
	}
	sag := seriesFiles(t, files, truth.TargetSeriesUID)
	ax := seriesFiles(t, files, seriesUIDByTE(t, files, 96.7, 256))
	cases := []struct {
		name   string
		stacks [][]File
		o      EnhancedOptions
	}{
		{"enhanced in order", [][]File{sag}, EnhancedOptions{}},
		{"enhanced shuffled", [][]File{sag}, EnhancedOptions{Shuffle: 3}},
		{"legacy shuffled", [][]File{sag}, EnhancedOptions{SOPClassUID: midsag.LegacyConvertedEnhancedMRImageStorage, Shuffle: 5}},
		{"rle basic table", [][]File{sag}, EnhancedOptions{TransferSyntaxUID: midsag.RLELossless, Shuffle: 7, FragmentsPerFrame: 2}},
		{"rle extended table", [][]File{sag}, EnhancedOptions{TransferSyntaxUID: midsag.RLELossless, OffsetTable: "extended", FragmentsPerFrame: 3}},
		{"rle no table", [][]File{sag}, EnhancedOptions{TransferSyntaxUID: midsag.RLELossless, OffsetTable: "none"}},
		{"two stacks", [][]File{sag, ax}, EnhancedOptions{Shuffle: 9}},
	}
	dir := t.TempDir()
	for ci, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			f, err := ToEnhancedMR(c.stacks, c.o)
			if err != nil {
				t.Fatal(err)
			}
			path := filepath.Join(dir, fmt.Sprintf("case%d.dcm", ci))
			if err := os.WriteFile(path, f.Data, 0o644); err != nil {
				t.Fatal(err)
			}
			out, _ := exec.Command(dciodvfy, path).CombinedOutput()
			for _, l := range strings.Split(string(out), "\n") {
				if strings.HasPrefix(l, "Error") {
					t.Errorf("dciodvfy: %s", l)
				}
			}
			read := path
			if c.o.FragmentsPerFrame > 1 {
				// pydicom 2.3's RLE handler takes one fragment per frame;
				// DCMTK's dcmdrle decodes frames split over fragments, so
				// pydicom reads its native output instead.
				read = path + ".native.dcm"
				testtool.Run(t, "dcmdrle", path, read)
			}
			js, err := exec.Command(py, "-c", pydicomEnhancedScript, read).Output()
			if err != nil {
				t.Fatalf("pydicom: %v", err)
			}
			var got []struct {
				Stack    string
				Pos      int
				IPP, IOP []float64
				SHA      string
			}
			if err := json.Unmarshal(js, &got); err != nil {
				t.Fatal(err)
			}
			want := 0
			for _, st := range c.stacks {
				want += len(st)
			}
			if len(got) != want {
				t.Fatalf("pydicom reads %d frames, want %d", len(got), want)
			}
			inOrder := true
			for i, g := range got {
				var si int
				fmt.Sscan(g.Stack, &si)
				if si < 1 || si > len(c.stacks) {
					t.Fatalf("frame %d: Stack ID %q", i+1, g.Stack)
				}
				src := matchSource(t, c.stacks[si-1], g.IPP)
				if src == nil {
					t.Fatalf("frame %d: position %v is no source image's", i+1, g.IPP)
				}
				if !closeAll(src.floats(0x00200037), g.IOP) {
					t.Errorf("frame %d: orientation %v, source %v", i+1, g.IOP, src.floats(0x00200037))
				}
				// In-Stack Position: the source's rank along the normal.
				n := src.normal()
				rank := 1
				for _, o := range c.stacks[si-1] {
					im, _ := readSimple(o.Data)
					if im.along(n) < src.along(n)-1e-6 {
						rank++
					}
				}
				if g.Pos != rank {
					t.Errorf("frame %d: In-Stack Position %d, rank along the normal %d", i+1, g.Pos, rank)
				}
				if h := sha256.Sum256(src.el[0x7FE00010].val); hex.EncodeToString(h[:]) != g.SHA {
					t.Errorf("frame %d: pydicom's pixels differ from the source image's", i+1)
				}
				if si != 1 || g.Pos != i+1 {
					inOrder = false
				}
			}
			if shuffled := c.o.Shuffle != 0; shuffled == inOrder {
				t.Errorf("frames in stack order: %v, shuffle seed %d", inOrder, c.o.Shuffle)
			}
		})
	}
}

func matchSource(t *testing.T, files []File, ipp []float64) *srcImage {
	t.Helper()
	for _, f := range files {
		im, err := readSimple(f.Data)
		if err != nil {
			t.Fatal(err)
		}
		if closeAll(im.floats(0x00200032), ipp) {
			return im
		}
	}
	return nil
}

func closeAll(a, b []float64) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if math.Abs(a[i]-b[i]) > 1e-6 {
			return false
		}
	}
	return true
}
