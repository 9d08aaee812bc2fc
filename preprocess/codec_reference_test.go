package preprocess

import (
	"fmt"
	"io/fs"
	"math"
	"os/exec"
	"path/filepath"
	"sort"
	"strings"
	"testing"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/internal/testtool"
	"github.com/midsag/midsag/preprocess/codec"
)

// lossyTolerance is the largest difference allowed between midsag's
// decode of a lossy frame and the reference decoder's, in stored values
// (after the mean over colour samples), and why.
var lossyTolerance = map[string]struct {
	max float64
	why string
}{
	// Go's image/jpeg and GDCM's IJG-derived libjpeg implement the
	// inverse DCT and the YCbCr to RGB conversion (JFIF 1.02) with
	// different integer rounding; ITU-T T.83 (JPEG compliance) allows a
	// decoder an error of 1 per sample from the reference IDCT, and the
	// colour conversion adds up to 1 per channel.
	midsag.JPEGBaseline8Bit:  {2, "IDCT rounding (ITU-T T.83) plus YCbCr->RGB rounding"},
	midsag.JPEGExtended12Bit: {2, "IDCT rounding (ITU-T T.83) plus YCbCr->RGB rounding"},
	// GDCM decodes JPEG 2000 with the same OpenJPEG library midsag uses
	// (Debian libopenjp2-7), so the irreversible 9/7 wavelet's floating
	// point gives the same rounding: no difference is allowed.
	midsag.JPEG2000: {0, "same OpenJPEG library as GDCM"},
	// JPEG-LS decoding is exact integer arithmetic in near-lossless mode
	// too (ITU-T T.87 A.4); NEAR bounds the error against the original,
	// not between decoders.
	midsag.JPEGLSNearLossless: {0, "JPEG-LS decoding is exact (ITU-T T.87)"},
}

// dicomFiles lists the files under dir that may be DICOM: every regular
// file except the samples' documentation.
func dicomFiles(t *testing.T, dir string) []string {
	t.Helper()
	var out []string
	err := filepath.WalkDir(dir, func(p string, d fs.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		switch strings.ToLower(filepath.Ext(p)) {
		case ".md", ".tsv", ".txt", ".json", ".dump", ".gz", ".py":
			return nil
		}
		if strings.HasPrefix(d.Name(), "LICENSE") || d.Name() == "README" {
			return nil
		}
		out = append(out, p)
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	sort.Strings(out)
	return out
}

// maxDiff returns the largest absolute difference between two images of
// the same size.
func maxDiff(a, b *midsag.Image) float64 {
	var m float64
	for i := range a.Pix {
		m = math.Max(m, math.Abs(float64(a.Pix[i])-float64(b.Pix[i])))
	}
	return m
}

// dcmtkDecompress names the DCMTK tool that writes each syntax as
// uncompressed Explicit VR Little Endian. DCMTK's JPEG-LS codec is its own
// CharLS fork and its JPEG codecs are IJG-derived, so they are
// independent of the libraries midsag links. DCMTK 3.6.7 has no JPEG 2000.
var dcmtkDecompress = map[string][]string{
	midsag.ImplicitVRLittleEndian:         {"dcmconv", "+te"},
	midsag.ExplicitVRLittleEndian:         {"dcmconv", "+te"},
	midsag.DeflatedExplicitVRLittleEndian: {"dcmconv", "+te"},
	midsag.ExplicitVRBigEndian:            {"dcmconv", "+te"},
	midsag.RLELossless:                    {"dcmdrle"},
	midsag.JPEGLossless:                   {"dcmdjpeg"},
	midsag.JPEGLosslessSV1:                {"dcmdjpeg"},
	midsag.JPEGBaseline8Bit:               {"dcmdjpeg"},
	midsag.JPEGExtended12Bit:              {"dcmdjpeg"},
	midsag.JPEGLSLossless:                 {"dcmdjpls"},
	midsag.JPEGLSNearLossless:             {"dcmdjpls"},
}

// TestCodecPixelsMatchReference decodes every file midsag can read and
// decode (Bits Allocated 1, 8 or 16; 1 or 3 samples; a transfer syntax in
// SupportedSyntaxes) among the real samples (vendor/ and codecs/, see
// their FILES.tsv) and pydicom's test files, and compares its first frame
// with two reference decoders, each of which writes the file as
// uncompressed Explicit VR Little Endian, whose plain pixel bytes midsag
// reads with no codec: GDCM (`gdcmconv --raw`) and DCMTK
// (dcmdjpeg, dcmdjpls, dcmdrle, dcmconv +te). Lossless syntaxes must be
// equal; lossy ones within lossyTolerance. GDCM 3.0 and DCMTK 3.6.7 do not
// know Deflated Image Frame Compression; TestCodecDeflatedFrameMatchesZlib
// covers it.
func TestCodecPixelsMatchReference(t *testing.T) {
	gdcm := testtool.GDCMConv(t)
	for _, tool := range []string{"dcmconv", "dcmdrle", "dcmdjpeg", "dcmdjpls"} {
		testtool.Command(t, tool)
	}
	files := append(dicomFiles(t, testtool.RealData(t)), dicomFiles(t, testtool.PydicomTestFiles)...)
	counts := map[refKey]*refTally{}
	var multi []string
	tmp := t.TempDir()
	for i, path := range files {
		inst, err := readFile(t, New(Options{}), path)
		if err != nil || inst.Rows == 0 || !comparable(inst) {
			continue // not an image midsag reads, or none the references write
		}
		name := strings.TrimPrefix(path, filepath.Dir(filepath.Dir(path))+"/")
		got, derr := Decode(inst)
		if r, _ := midsag.ReasonOf(derr); r == midsag.ReasonUnsupportedSyntax && strings.Contains(derr.Error(), "12-bit") {
			continue // refused by design; TestCodecJPEG12BitRefused
		}
		if inst.NumberOfFrames > 1 {
			multi = append(multi, fmt.Sprintf("%s (%d frames)", name, inst.NumberOfFrames))
		}
		for ref, args := range referenceDecoders(inst, gdcm) {
			raw := filepath.Join(tmp, fmt.Sprintf("raw%d-%s.dcm", i, strings.Fields(ref)[0]))
			out, rerr := exec.Command(args[0], append(args[1:], path, raw)...).CombinedOutput()
			if rerr != nil {
				if derr == nil {
					t.Logf("%s: midsag decodes it, %s fails (%v): %s", name, ref, rerr, strings.TrimSpace(string(out)))
				}
				continue
			}
			if derr != nil {
				t.Errorf("%s (%s): midsag refuses a file %s decodes: %v", name, inst.TransferSyntaxUID, ref, derr)
				continue
			}
			k := refKey{inst.TransferSyntaxUID, ref}
			if counts[k] == nil {
				counts[k] = &refTally{}
			}
			counts[k].compared++
			if comparePixels(t, name, ref, inst, got, mustReadDecode(t, raw)) {
				counts[k].equal++
			}
		}
	}
	logAndCheckCoverage(t, counts, multi)
}

// refKey and refTally count the reference comparisons by transfer syntax
// and reference decoder.
type (
	refKey   struct{ ts, ref string }
	refTally struct{ compared, equal int }
)

// comparable reports whether an image is one the comparison covers: Bits
// Allocated 1, 8 or 16; 1 or 3 samples; a transfer syntax in
// SupportedSyntaxes other than Deflated Image Frame Compression, which
// the references do not know; no YBR_FULL_422 in a native syntax.
func comparable(inst *midsag.Instance) bool {
	ts := inst.TransferSyntaxUID
	args, native := dcmtkDecompress[ts]
	native = native && args[0] == "dcmconv"
	if _, ok := SupportedSyntaxes[ts]; !ok || ts == midsag.DeflatedImageFrameCompression {
		return false
	}
	if inst.BitsAllocated != 1 && inst.BitsAllocated != 8 && inst.BitsAllocated != 16 {
		return false
	}
	if inst.SamplesPerPixel != 1 && inst.SamplesPerPixel != 3 {
		return false
	}
	return !(native && inst.Photometric == "YBR_FULL_422")
}

// referenceDecoders returns the command lines that write inst as
// uncompressed Explicit VR Little Endian, by reference name.
func referenceDecoders(inst *midsag.Instance, gdcm string) map[string][]string {
	ts := inst.TransferSyntaxUID
	refs := map[string][]string{"GDCM": {gdcm, "--raw"}}
	if _, ok := lossyTolerance[ts]; ok && inst.SamplesPerPixel == 3 && strings.HasPrefix(ts, "1.2.840.10008.1.2.4.5") {
		// gdcmconv --raw keeps a lossy JPEG's YBR_FULL photometric
		// interpretation and writes Y, Cb, Cr, where midsag, like
		// dcmdjpeg, converts to RGB: only DCMTK compares here.
		delete(refs, "GDCM")
	}
	if args, ok := dcmtkDecompress[ts]; ok {
		refs["DCMTK "+args[0]] = args
	}
	return refs
}

// comparePixels compares midsag's decode of inst with a reference's and
// reports whether they are exactly equal; a difference beyond the
// syntax's tolerance is an error.
func comparePixels(t *testing.T, name, ref string, inst *midsag.Instance, got, want *midsag.Image) bool {
	t.Helper()
	ts := inst.TransferSyntaxUID
	if want.Rows != got.Rows || want.Columns != got.Columns {
		t.Errorf("%s: %dx%d, %s %dx%d", name, got.Rows, got.Columns, ref, want.Rows, want.Columns)
		return false
	}
	d, tol := maxDiff(want, got), lossyTolerance[ts].max
	frame, _ := frameBytes(inst)
	if inst.SamplesPerPixel == 3 && chromaSubsampled(frame) {
		// ITU-T T.81 A.1.1 leaves chroma upsampling to the application:
		// IJG libjpeg interpolates ("fancy" upsampling), Go's image/jpeg
		// repeats samples, so colour edges differ by tens of levels. The
		// mean is bounded by 2 levels in 255 instead (measured: 0.04 for
		// 4:2:2, 1.1 to 1.4 for 4:2:0 and 4:1:1 on pydicom's colour-bar
		// files).
		if m := meanDiff(want, got); m > 2 {
			t.Errorf("%s (%s, subsampled chroma): mean difference from %s %.3f > 2", name, ts, ref, m)
		} else {
			t.Logf("%s (%s, subsampled chroma): mean difference from %s %.3f, largest %g", name, ts, ref, m, d)
		}
		return false
	}
	if d > tol {
		t.Errorf("%s (%s): largest difference from %s %g, allowed %g", name, ts, ref, d, tol)
		return false
	}
	if d != 0 {
		t.Logf("%s (%s): largest difference from %s %g", name, ts, ref, d)
	}
	return d == 0
}

// logAndCheckCoverage logs the tallies and fails when a syntax the
// samples hold was never compared: a comparison that silently found none
// would prove nothing.
func logAndCheckCoverage(t *testing.T, counts map[refKey]*refTally, multi []string) {
	t.Helper()
	var keys []refKey
	for k := range counts {
		keys = append(keys, k)
	}
	sort.Slice(keys, func(i, j int) bool {
		return keys[i].ts < keys[j].ts || keys[i].ts == keys[j].ts && keys[i].ref < keys[j].ref
	})
	for _, k := range keys {
		t.Logf("%s %s vs %s: %d compared, %d exactly equal, the rest within tolerance (largest %g; mean 2 for subsampled chroma)", k.ts, syntaxNames[k.ts], k.ref, counts[k].compared, counts[k].equal, lossyTolerance[k.ts].max)
	}
	t.Logf("multi-frame files (frame 0 compared): %s", strings.Join(multi, ", "))
	// The samples hold these syntaxes (FILES.tsv, pydicom's test files).
	need := []refKey{{midsag.ExplicitVRLittleEndian, "GDCM"}, {midsag.RLELossless, "DCMTK dcmdrle"},
		{midsag.JPEGLosslessSV1, "DCMTK dcmdjpeg"}, {midsag.JPEGBaseline8Bit, "DCMTK dcmdjpeg"}}
	if codec.JPEG2000Built {
		need = append(need, refKey{midsag.JPEG2000Lossless, "GDCM"}, refKey{midsag.JPEG2000, "GDCM"})
	}
	if codec.JPEGLSBuilt {
		need = append(need, refKey{midsag.JPEGLSLossless, "GDCM"}, refKey{midsag.JPEGLSLossless, "DCMTK dcmdjpls"})
	}
	for _, k := range need {
		if counts[k] == nil {
			t.Errorf("no file of %s (%s) was compared with %s", k.ts, syntaxNames[k.ts], k.ref)
		}
	}
}

// meanDiff returns the mean absolute difference between two images of
// the same size.
func meanDiff(a, b *midsag.Image) float64 {
	var sum float64
	for i := range a.Pix {
		sum += math.Abs(float64(a.Pix[i]) - float64(b.Pix[i]))
	}
	return sum / float64(len(a.Pix))
}

// chromaSubsampled reports whether a JPEG frame's components have
// different sampling factors (ITU-T T.81 B.2.2, Hi and Vi in the SOF).
func chromaSubsampled(b []byte) bool {
	for i := 2; i+4 <= len(b) && b[i] == 0xFF; {
		m, length := b[i+1], int(b[i+2])<<8|int(b[i+3])
		if m >= 0xC0 && m <= 0xCF && m != 0xC4 && m != 0xC8 && m != 0xCC {
			if i+10 > len(b) {
				return false
			}
			n := int(b[i+9])
			for c := 1; c < n && i+10+3*c+1 < len(b); c++ {
				if b[i+10+3*c+1] != b[i+11] {
					return true
				}
			}
			return false
		}
		i += 2 + length
	}
	return false
}

// mustReadDecode reads and decodes a file or fails t.
func mustReadDecode(t *testing.T, path string) *midsag.Image {
	t.Helper()
	_, img := mustDecode(t, path)
	return img
}
