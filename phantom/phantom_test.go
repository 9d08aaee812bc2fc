package phantom

import (
	"bytes"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"encoding/json"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"sync"
	"testing"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/internal/testtool"
)

// needTool returns the path of an external tool, skipping the test when it
// is missing unless MIDSAG_REQUIRE_TOOLS=1.
func needTool(t *testing.T, name string) string {
	t.Helper()
	p, err := exec.LookPath(name)
	if err != nil {
		if os.Getenv("MIDSAG_REQUIRE_TOOLS") == "1" {
			t.Fatalf("%s is required (MIDSAG_REQUIRE_TOOLS=1): %v", name, err)
		}
		t.Skipf("%s not installed", name)
	}
	return p
}

// needPydicom returns /usr/bin/python3 when it can import pydicom.
func needPydicom(t *testing.T) string {
	t.Helper()
	py := "/usr/bin/python3"
	if err := exec.Command(py, "-c", "import pydicom, numpy").Run(); err != nil {
		if os.Getenv("MIDSAG_REQUIRE_TOOLS") == "1" {
			t.Fatalf("pydicom is required (MIDSAG_REQUIRE_TOOLS=1): %v", err)
		}
		t.Skip("pydicom not available under /usr/bin/python3")
	}
	return py
}

// writeStudyFiles writes files under dir and returns their paths.
func writeStudyFiles(t *testing.T, dir string, files []File) []string {
	t.Helper()
	var paths []string
	for _, f := range files {
		paths = append(paths, testtool.WriteFile(t, dir, f.Name, f.Data))
	}
	return paths
}

// Checked against the DICOM toolkits: dcmtk's dcmdump must parse every file
// of every transfer syntax, and dicom3tools' dciodvfy must report no Error
// line for the MR Image IOD (PS3.3 A.4) on a sample of each series kind.
func TestDcmdumpAndDciodvfyAcceptEverySyntax(t *testing.T) {
	dcmdump := needTool(t, "dcmdump")
	dciodvfy := needTool(t, "dciodvfy")
	dcmconv := needTool(t, "dcmconv")
	for i, ts := range SupportedSyntaxes() {
		t.Run(ts, func(t *testing.T) {
			// Decoys on two syntaxes cover every series kind; the rest stay fast.
			opts := Options{Seed: 41, Syntaxes: []string{ts}, NoDecoys: i > 1}
			files, truth, err := GenerateStudy(opts, i)
			if err != nil {
				t.Fatal(err)
			}
			if truth.TransferSyntaxUID != ts {
				t.Fatalf("transfer syntax %s, want %s", truth.TransferSyntaxUID, ts)
			}
			paths := writeStudyFiles(t, t.TempDir(), files)
			for _, p := range paths {
				out, err := exec.Command(dcmdump, "-q", "+L", p).CombinedOutput()
				if err != nil || bytes.Contains(out, []byte("E: ")) {
					t.Fatalf("dcmdump %s: %v\n%s", p, err, out)
				}
				if !bytes.Contains(out, []byte("(0008,0016) UI =MRImageStorage")) {
					t.Fatalf("dcmdump %s: SOP Class is not MR Image Storage:\n%s", p, out)
				}
			}
			seen := map[string]bool{}
			for _, p := range paths {
				out, _ := exec.Command(dcmdump, "-q", "+P", "0008,103e", "+P", "0020,000e", p).CombinedOutput()
				series := string(out)
				if seen[series] {
					continue
				}
				seen[series] = true
				if ts == midsag.DeflatedExplicitVRLittleEndian {
					// dciodvfy does not inflate (PS3.5 A.5); dcmtk's
					// dcmconv writes the same dataset explicit little endian.
					plain := p + ".ele"
					if out, err := exec.Command(dcmconv, "+te", p, plain).CombinedOutput(); err != nil {
						t.Fatalf("dcmconv %s: %v\n%s", p, err, out)
					}
					p = plain
				}
				out, _ = exec.Command(dciodvfy, p).CombinedOutput()
				for _, line := range strings.Split(string(out), "\n") {
					if strings.HasPrefix(line, "Error") {
						t.Errorf("dciodvfy %s: %s\n%s", p, line, out)
					}
				}
			}
		})
	}
}

// pydicomDigest reads each file with pydicom and prints SOP Instance UID,
// transfer syntax and the sha256 of the decoded pixels as little-endian
// uint16 (pydicom's pixel_array; PS3.5 8.1.1 native, Annex G RLE).
const pydicomDigest = `
import sys, hashlib, pydicom, numpy
for p in sys.argv[1:]:
    ds = pydicom.dcmread(p)
    a = ds.pixel_array.astype('<u2')
    print(ds.SOPInstanceUID, ds.file_meta.TransferSyntaxUID, a.shape[0], a.shape[1], hashlib.sha256(a.tobytes()).hexdigest())
`

var hookMu sync.Mutex

// Checked against pydicom: every native and RLE syntax decodes to exactly
// the stored values the renderer produced; JPEG lossless after dcmtk's
// dcmdjpeg.
func TestPydicomPixelsEqualWritten(t *testing.T) {
	py := needPydicom(t)
	hookMu.Lock()
	defer hookMu.Unlock()
	want := map[string]string{}
	pixelHook = func(uid string, pix []uint16) {
		b := make([]byte, 2*len(pix))
		for i, v := range pix {
			binary.LittleEndian.PutUint16(b[2*i:], v)
		}
		h := sha256.Sum256(b)
		want[uid] = hex.EncodeToString(h[:])
	}
	defer func() { pixelHook = nil }()
	dir := t.TempDir()
	var paths []string
	for i, ts := range []string{midsag.ExplicitVRLittleEndian, midsag.ImplicitVRLittleEndian, midsag.ExplicitVRBigEndian, midsag.DeflatedExplicitVRLittleEndian, midsag.RLELossless} {
		files, _, err := GenerateStudy(Options{Seed: 5, Syntaxes: []string{ts}, NoDecoys: true}, i)
		if err != nil {
			t.Fatal(err)
		}
		ps := writeStudyFiles(t, dir, files)
		paths = append(paths, ps[0], ps[len(ps)-1])
	}
	// pydicom has no JPEG lossless decoder of its own; dcmtk's dcmdjpeg
	// decodes the SV1 codestream (ITU-T T.81 process 14) to native first.
	dcmdjpeg := needTool(t, "dcmdjpeg")
	files, _, err := GenerateStudy(Options{Seed: 5, Syntaxes: []string{midsag.JPEGLosslessSV1}, NoDecoys: true}, 9)
	if err != nil {
		t.Fatal(err)
	}
	for _, p := range writeStudyFiles(t, dir, files)[:2] {
		plain := p + ".native"
		if out, err := exec.Command(dcmdjpeg, p, plain).CombinedOutput(); err != nil {
			t.Fatalf("dcmdjpeg %s: %v\n%s", p, err, out)
		}
		paths = append(paths, plain)
	}
	out, err := exec.Command(py, append([]string{"-c", pydicomDigest}, paths...)...).CombinedOutput()
	if err != nil {
		t.Fatalf("pydicom: %v\n%s", err, out)
	}
	lines := strings.Split(strings.TrimSpace(string(out)), "\n")
	if len(lines) != len(paths) {
		t.Fatalf("pydicom read %d of %d files:\n%s", len(lines), len(paths), out)
	}
	for _, line := range lines {
		f := strings.Fields(line)
		if len(f) != 5 {
			t.Fatalf("pydicom output %q", line)
		}
		if w, ok := want[f[0]]; !ok || w != f[4] {
			t.Errorf("%s (%s): pydicom pixels differ from the rendered values", f[0], f[1])
		}
	}
}

// pydicomGeometry prints, per file of the target series, SOP Instance UID,
// Image Position (Patient) and Image Orientation (Patient) as pydicom
// reads them.
const pydicomGeometry = `
import sys, json, pydicom
out = []
for p in sys.argv[2:]:
    ds = pydicom.dcmread(p, stop_before_pixels=True)
    if ds.SeriesInstanceUID != sys.argv[1]:
        continue
    out.append({"UID": ds.SOPInstanceUID, "IPP": [float(v) for v in ds.ImagePositionPatient], "IOP": [float(v) for v in ds.ImageOrientationPatient], "Spacing": float(ds.SpacingBetweenSlices)})
print(json.dumps(out))
`

// The centre slice is recomputed from the headers as pydicom reads them:
// slices sorted by position along the normal row × column (PS3.3
// C.7.6.2.1.1), and the slice whose plane is nearest the cord point.
func TestCenterSliceFromHeaders(t *testing.T) {
	py := needPydicom(t)
	dir := t.TempDir()
	for i := 0; i < 12; i++ {
		files, truth, err := GenerateStudy(Options{Seed: 9, NoDecoys: i%4 != 0, Syntaxes: []string{midsag.ExplicitVRLittleEndian, midsag.ExplicitVRBigEndian, midsag.ImplicitVRLittleEndian}}, i)
		if err != nil {
			t.Fatal(err)
		}
		paths := writeStudyFiles(t, dir, files)
		out, err := exec.Command(py, append([]string{"-c", pydicomGeometry, truth.TargetSeriesUID}, paths...)...).CombinedOutput()
		if err != nil {
			t.Fatalf("pydicom: %v\n%s", err, out)
		}
		var rows []struct {
			UID     string
			IPP     [3]float64
			IOP     [6]float64
			Spacing float64
		}
		if err := json.Unmarshal(out, &rows); err != nil {
			t.Fatalf("%v: %s", err, out)
		}
		if len(rows) != truth.Slices {
			t.Fatalf("study %d: %d target files, truth says %d", i, len(rows), truth.Slices)
		}
		nrm := vec{rows[0].IOP[0], rows[0].IOP[1], rows[0].IOP[2]}.cross(vec{rows[0].IOP[3], rows[0].IOP[4], rows[0].IOP[5]}).norm()
		pos := func(k int) float64 { return nrm.dot(rows[k].IPP) }
		// Sort by position along the normal, ascending.
		for a := 1; a < len(rows); a++ {
			for b := a; b > 0 && pos(b) < pos(b-1); b-- {
				rows[b], rows[b-1] = rows[b-1], rows[b]
			}
		}
		cord := vec(truth.CordPointMM)
		best, bestD := -1, math.Inf(1)
		for k := range rows {
			if d := math.Abs(nrm.dot(cord.sub(rows[k].IPP))); d < bestD {
				best, bestD = k, d
			}
		}
		if best != truth.CenterIndex || rows[best].UID != truth.CenterSOPInstanceUID {
			t.Errorf("study %d: nearest slice %d (%s), truth %d (%s)", i, best, rows[best].UID, truth.CenterIndex, truth.CenterSOPInstanceUID)
		}
		// The centre is unambiguous: within 0.3 spacings of the cord point.
		if bestD > 0.3*rows[0].Spacing+1e-3 {
			t.Errorf("study %d: centre slice %.2f mm from the cord point, spacing %.2f", i, bestD, rows[0].Spacing)
		}
		// Offset of the slab centre in spacings, recomputed from positions.
		slab := (pos(0) + pos(len(rows)-1)) / 2
		off := (slab - nrm.dot(cord)) / rows[0].Spacing
		if math.Abs(off-truth.SlabOffsetSlices) > 0.01 || math.Abs(off) > 3.0001 {
			t.Errorf("study %d: slab offset %.3f, truth %.3f", i, off, truth.SlabOffsetSlices)
		}
		if math.Abs(cord[0]-truth.MidlineXMM) > 1e-9 || math.Abs(truth.MidlineXMM) > 10 {
			t.Errorf("study %d: midline x %.3f", i, truth.MidlineXMM)
		}
	}
}

// The spinous processes and nuchal ligament are midline-only structures
// (|x| < ~3.5 mm, from memory), so a sagittal slice shows them only near
// the midsagittal plane; the cord is ~11 mm wide (from memory).
func TestMidlineOnlyStructures(t *testing.T) {
	for seed := int64(0); seed < 5; seed++ {
		n := newNeck(rngFor("neck", seed, 0), -1)
		count := func(x float64) (spine, cord int) {
			for y := n.canalA + 5; y < n.canalA+30; y += 0.5 {
				for z := -50.0; z < 50; z += 0.5 {
					ys := y + n.lord*z*z
					if t := n.at(x, ys, z); t == tMarrow {
						spine++
					}
				}
			}
			for z := -50.0; z < 50; z += 0.5 {
				if n.at(x, n.cordY+n.lord*z*z, z) == tCord {
					cord++
				}
			}
			return
		}
		midSpine, midCord := count(0)
		latSpine, latCord := count(8)
		if midSpine < 50 || latSpine != 0 {
			t.Errorf("seed %d: spinous marrow samples midline %d, at 8 mm %d", seed, midSpine, latSpine)
		}
		if midCord < 190 || latCord != 0 {
			t.Errorf("seed %d: cord samples midline %d, at 8 mm %d", seed, midCord, latCord)
		}
	}
}

// Compression (label 1) puts disc or osteophyte where the front of the cord
// would be at the recorded level; label 0 keeps CSF ahead of the cord at
// every disc.
func TestCompressionReachesCord(t *testing.T) {
	for seed := int64(0); seed < 10; seed++ {
		for _, level := range []int{-1, 1, 2, 3, 4} {
			n := newNeck(rngFor("neck", seed, level), level)
			for k := 1; k <= 4; k++ {
				z := (2 - float64(k)) * n.period
				front := n.cordY - n.cordA + 0.3 + n.lord*z*z
				got := n.at(0, front, z)
				csf := n.at(0, front-0.6, z)
				if k == level {
					if got == tCord || got == tCSF {
						t.Errorf("seed %d level %s: cord front is %v, want protrusion", seed, discNames[k], got)
					}
				} else if got != tCord || csf != tCSF {
					t.Errorf("seed %d level %d disc %s: cord front %v, ahead %v", seed, level, discNames[k], got, csf)
				}
			}
		}
	}
}

func TestCompressionRateAndLevel(t *testing.T) {
	for _, tc := range []struct {
		rate float64
		want int // studies of 8 with compression, -1 for "some but not all"
	}{{-1, 0}, {1, 8}, {0, -1}} {
		n := 0
		for i := 0; i < 8; i++ {
			opts := Options{Seed: 2, CompressionRate: tc.rate, NoDecoys: true, Syntaxes: []string{midsag.ExplicitVRLittleEndian}}
			_, truth, err := GenerateStudy(opts, i)
			if err != nil {
				t.Fatal(err)
			}
			if truth.Compression {
				n++
				if !regexp.MustCompile(`^C[3-6]-C[4-7]$`).MatchString(truth.Level) {
					t.Errorf("level %q outside C3-C4..C6-C7", truth.Level)
				}
			} else if truth.Level != "" {
				t.Errorf("level %q without compression", truth.Level)
			}
		}
		if (tc.want >= 0 && n != tc.want) || (tc.want < 0 && (n == 0 || n == 8)) {
			t.Errorf("rate %v: %d of 8 compressed", tc.rate, n)
		}
	}
	if _, _, err := GenerateStudy(Options{CompressionRate: 1.5}, 0); err == nil {
		t.Error("rate 1.5 accepted")
	}
	if _, _, err := GenerateStudy(Options{Syntaxes: []string{"1.2.3"}}, 0); err == nil {
		t.Error("unknown transfer syntax accepted")
	}
}

// UIDs follow PS3.5 9.1 (digits and dots, no leading zero in a component,
// at most 64 characters) under the 2.25 root (PS3.5 B.2); studies are
// deterministic per seed and index.
func TestDeterministicAndValidUIDs(t *testing.T) {
	opts := Options{Seed: 77, NoDecoys: true}
	a, ta, err := GenerateStudy(opts, 3)
	if err != nil {
		t.Fatal(err)
	}
	b, tb, err := GenerateStudy(opts, 3)
	if err != nil {
		t.Fatal(err)
	}
	if ta != tb || len(a) != len(b) {
		t.Fatal("same seed and index gave different studies")
	}
	for i := range a {
		if a[i].Name != b[i].Name || !bytes.Equal(a[i].Data, b[i].Data) {
			t.Fatalf("file %d differs between runs", i)
		}
	}
	_, tc, err := GenerateStudy(opts, 4)
	if err != nil {
		t.Fatal(err)
	}
	if tc.StudyInstanceUID == ta.StudyInstanceUID {
		t.Error("two studies share a Study Instance UID")
	}
	uid := regexp.MustCompile(`^2\.25\.(0|[1-9][0-9]*)$`)
	for _, u := range []string{ta.StudyInstanceUID, ta.TargetSeriesUID, ta.CenterSOPInstanceUID, implementationClassUID} {
		if !uid.MatchString(u) || len(u) > 64 {
			t.Errorf("UID %q breaks PS3.5 9.1", u)
		}
	}
}

func TestGenerateWritesLabelsAndTruth(t *testing.T) {
	dir := t.TempDir()
	truths, err := Generate(dir, Options{Studies: 3, Seed: 4, NoDecoys: true, Syntaxes: []string{midsag.DeflatedExplicitVRLittleEndian}})
	if err != nil {
		t.Fatal(err)
	}
	labels, err := os.ReadFile(filepath.Join(dir, "labels.csv"))
	if err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(strings.TrimSpace(string(labels)), "\n")
	if len(lines) != 4 || lines[0] != "study_instance_uid,label" {
		t.Fatalf("labels.csv:\n%s", labels)
	}
	for i, tr := range truths {
		want := tr.StudyInstanceUID + ",0"
		if tr.Compression {
			want = tr.StudyInstanceUID + ",1"
		}
		if lines[i+1] != want {
			t.Errorf("labels line %d = %q, want %q", i+1, lines[i+1], want)
		}
		ents, err := os.ReadDir(filepath.Join(dir, tr.Study))
		if err != nil || len(ents) != tr.Slices {
			t.Errorf("%s: %d files, want %d (%v)", tr.Study, len(ents), tr.Slices, err)
		}
	}
	var back []StudyTruth
	js, err := os.ReadFile(filepath.Join(dir, "truth.json"))
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(js, &back); err != nil || len(back) != 3 || back[2] != truths[2] {
		t.Errorf("truth.json does not round-trip: %v", err)
	}
}

// BenchmarkGenerateStudyNoDecoys measures one target-only study, the unit
// of the 200-study midline test.
func BenchmarkGenerateStudyNoDecoys(b *testing.B) {
	opts := Options{Seed: 1, NoDecoys: true}
	for i := 0; b.Loop(); i++ {
		if _, _, err := GenerateStudy(opts, i%50); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkGenerateStudy measures a full study with the four decoy series.
func BenchmarkGenerateStudy(b *testing.B) {
	opts := Options{Seed: 1}
	for i := 0; b.Loop(); i++ {
		if _, _, err := GenerateStudy(opts, i%50); err != nil {
			b.Fatal(err)
		}
	}
}
