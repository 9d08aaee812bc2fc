package preprocess

import (
	"encoding/binary"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/internal/testtool"
	"github.com/midsag/midsag/phantom"
	"github.com/midsag/midsag/preprocess/codec"
)

// needCodec skips a test that needs a cgo codec this binary was built
// without, or fails it when MIDSAG_REQUIRE_CODECS=1 (set by .ci/run, which
// installs the libraries so that make sets the build tags).
func needCodec(t *testing.T, built bool, lib codec.NotBuiltError) {
	t.Helper()
	if built {
		return
	}
	if os.Getenv("MIDSAG_REQUIRE_CODECS") == "1" {
		t.Fatalf("%s and MIDSAG_REQUIRE_CODECS=1", lib.Error())
	}
	t.Skip(lib.Error())
}

// runtimeText are fragments of Go runtime panics that must never reach a
// refusal message.
var runtimeText = []string{"runtime error", "nil pointer", "invalid memory address", "panic", "goroutine", "index out of range"}

// TestCodecSyntaxListsMatchBuild checks that SupportedSyntaxes tells what
// this binary decodes: the cgo syntaxes are in it exactly when built, and
// in NeedRebuild otherwise.
func TestCodecSyntaxListsMatchBuild(t *testing.T) {
	cases := map[string]bool{
		midsag.JPEG2000Lossless: codec.JPEG2000Built, midsag.JPEG2000: codec.JPEG2000Built,
		midsag.JPEGLSLossless: codec.JPEGLSBuilt, midsag.JPEGLSNearLossless: codec.JPEGLSBuilt,
		midsag.DeflatedImageFrameCompression: true, midsag.JPEGExtended12Bit: true, midsag.ExplicitVRLittleEndian: true,
	}
	for uid, built := range cases {
		_, sup := SupportedSyntaxes[uid]
		_, rebuild := NeedRebuild[uid]
		if sup != built || rebuild == built {
			t.Errorf("%s: supported %v, need rebuild %v; built %v", uid, sup, rebuild, built)
		}
	}
	if len(SupportedSyntaxes)+len(NeedRebuild) != len(syntaxNames) {
		t.Errorf("%d supported + %d needing a rebuild, %d known", len(SupportedSyntaxes), len(NeedRebuild), len(syntaxNames))
	}
}

// TestCodecRefusesOrDecodesWithoutLibrary decodes pydicom's MR_small in
// JPEG 2000 and JPEG-LS (pydicom test_files README: the same image as
// MR_small.dcm) to MR_small's pixels when the codec is built, and
// otherwise refuses with unsupported_transfer_syntax naming the Debian
// package and the build tag.
func TestCodecRefusesOrDecodesWithoutLibrary(t *testing.T) {
	_, want := mustDecode(t, testtool.PydicomFile(t, "MR_small.dcm"))
	for file, c := range map[string]struct {
		built bool
		lib   codec.NotBuiltError
	}{
		"MR_small_jp2klossless.dcm":     {codec.JPEG2000Built, codec.JPEG2000Library},
		"MR_small_jpeg_ls_lossless.dcm": {codec.JPEGLSBuilt, codec.JPEGLSLibrary},
	} {
		inst, err := readFile(t, New(Options{}), testtool.PydicomFile(t, file))
		if err != nil {
			t.Fatal(err)
		}
		img, err := Decode(inst)
		if c.built {
			if err != nil {
				t.Fatalf("%s: %v", file, err)
			}
			samePixels(t, file, want, img)
			continue
		}
		me := midsag.RefusalOf(err)
		if me == nil || me.Reason != midsag.ReasonUnsupportedSyntax || !strings.Contains(me.Msg, c.lib.Package) ||
			!strings.Contains(me.Msg, "-tags "+c.lib.Tag) || !strings.Contains(me.Msg, inst.TransferSyntaxUID) {
			t.Errorf("%s without the codec: %v, want unsupported_transfer_syntax naming %s, the tag %s and the UID", file, err, c.lib.Package, c.lib.Tag)
		}
	}
}

// TestCodecJPEG12BitRefused checks pydicom's two JPEG Extended files
// with 12-bit samples (JPEG-lossy.dcm, JPGExtended.dcm; transfer syntax
// 1.2.840.10008.1.2.4.51, SOF1 precision 12): refused as
// unsupported_transfer_syntax with a message naming the UID, the 12-bit
// precision and a conversion, never as bad_pixel_data. The precision is
// read from the frame, so both files are also checked to say 12 to
// DCMTK's dcmdump.
func TestCodecJPEG12BitRefused(t *testing.T) {
	for _, file := range []string{"JPEG-lossy.dcm", "JPGExtended.dcm"} {
		path := testtool.PydicomFile(t, file)
		if out := string(testtool.Run(t, "dcmdump", "+P", "0028,0101", path)); !strings.Contains(out, "US 12") {
			t.Fatalf("%s: dcmdump says %q, want Bits Stored 12", file, out)
		}
		inst, err := readFile(t, New(Options{}), path)
		if err != nil {
			t.Fatal(err)
		}
		_, err = Decode(inst)
		me := midsag.RefusalOf(err)
		if me == nil || me.Reason != midsag.ReasonUnsupportedSyntax || !strings.Contains(me.Msg, midsag.JPEGExtended12Bit) ||
			!strings.Contains(me.Msg, "12-bit") || !strings.Contains(me.Msg, "dcmdjpeg") {
			t.Errorf("%s: %v, want unsupported_transfer_syntax naming the UID, 12-bit and dcmdjpeg", file, err)
		}
	}
}

// TestCodecJPEGExtended8Bit checks that transfer syntax .51 with 8-bit
// samples (ITU-T T.81 process 2, SOF1) is decoded: an 8-bit ultrasound
// frame from the real samples, compressed with DCMTK's `dcmcjpeg +ee`,
// decoded by midsag and by DCMTK's dcmdjpeg. Grey samples, so only the
// inverse DCT's rounding differs: at most 1 per sample (ITU-T T.83).
func TestCodecJPEGExtended8Bit(t *testing.T) {
	src := filepath.Join(testtool.RealData(t), "codecs/pydicom-data/data_store/data/JPGLosslessP14SV1_1s_1f_8b.dcm")
	dir := t.TempDir()
	raw, ext, back := filepath.Join(dir, "raw.dcm"), filepath.Join(dir, "ext.dcm"), filepath.Join(dir, "back.dcm")
	testtool.Run(t, "dcmdjpeg", src, raw)
	testtool.Run(t, "dcmcjpeg", "+ee", raw, ext)
	testtool.Run(t, "dcmdjpeg", ext, back)
	inst, got := mustDecode(t, ext)
	if inst.TransferSyntaxUID != midsag.JPEGExtended12Bit || inst.BitsStored != 8 {
		t.Fatalf("dcmcjpeg +ee wrote %s with %d bits stored", inst.TransferSyntaxUID, inst.BitsStored)
	}
	_, want := mustDecode(t, back)
	if d := maxDiff(want, got); d > 1 {
		t.Errorf("largest difference from dcmdjpeg %g > 1", d)
	}
}

// TestCodecJPEGLSNearLossless compresses a phantom slice with DCMTK's
// `dcmcjpls +en +md 3` (JPEG-LS near-lossless, NEAR = 3) and checks that
// midsag's decode equals DCMTK's dcmdjpls exactly (JPEG-LS decoding is
// exact, ITU-T T.87 A.4) and is within NEAR of the original (T.87 3.1,
// the definition of near-lossless).
func TestCodecJPEGLSNearLossless(t *testing.T) {
	needCodec(t, codec.JPEGLSBuilt, codec.JPEGLSLibrary)
	files, _, err := phantom.GenerateStudy(phantom.Options{Seed: 3, NoDecoys: true, Syntaxes: []string{midsag.ExplicitVRLittleEndian}}, 0)
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	orig, nl, back := filepath.Join(dir, "orig.dcm"), filepath.Join(dir, "nl.dcm"), filepath.Join(dir, "back.dcm")
	if err := os.WriteFile(orig, files[len(files)/2].Data, 0o644); err != nil {
		t.Fatal(err)
	}
	testtool.Run(t, "dcmcjpls", "+en", "+md", "3", orig, nl)
	testtool.Run(t, "dcmdjpls", nl, back)
	inst, got := mustDecode(t, nl)
	if inst.TransferSyntaxUID != midsag.JPEGLSNearLossless {
		t.Fatalf("dcmcjpls +en wrote %s", inst.TransferSyntaxUID)
	}
	frame, err := frameBytes(inst)
	if err != nil {
		t.Fatal(err)
	}
	f, err := codec.DecodeJPEGLS(frame, codec.Expect{Rows: inst.Rows, Cols: inst.Columns, Components: 1, BitsAllocated: inst.BitsAllocated})
	if err != nil || f.Near != 3 {
		t.Fatalf("NEAR %v, err %v; want 3", f, err)
	}
	_, want := mustDecode(t, back)
	_, o := mustDecode(t, orig)
	if d := maxDiff(want, got); d != 0 {
		t.Errorf("largest difference from dcmdjpls %g, want 0", d)
	}
	slope := inst.RescaleSlope
	if slope == 0 {
		slope = 1
	}
	d := maxDiff(o, got)
	if d > 3*slope+1e-3 {
		t.Errorf("largest difference from the original %g, beyond NEAR 3", d)
	}
	if d == 0 {
		t.Errorf("near-lossless decode equals the original exactly: the test would not see a lossy decode")
	}
}

// TestCodecDeflatedFrameMatchesZlib reads the real Deflated Image Frame
// Compression file (pydicom-data's liver_deflate.dcm, a 3-frame 1-bit
// segmentation; PS3.5 A.4.13), which midsag once refused as not_dicom, and
// compares frame 0 with Python's zlib (raw deflate, wbits -15) and numpy's
// unpackbits with little bit order (PS3.5 8.1.1: the first pixel is the
// least significant bit), on fragments split by pydicom.
func TestCodecDeflatedFrameMatchesZlib(t *testing.T) {
	path := filepath.Join(testtool.RealData(t), "codecs/pydicom-data/data_store/data/liver_deflate.dcm")
	py := testtool.Python(t, "pydicom", "numpy", "zlib")
	script := `import sys, zlib, pydicom, numpy as np
from pydicom.encaps import generate_pixel_data_frame
ds = pydicom.dcmread(sys.argv[1])
f = next(generate_pixel_data_frame(ds.PixelData, int(ds.NumberOfFrames)))
b = zlib.decompress(f, -15)
a = np.unpackbits(np.frombuffer(b, np.uint8), bitorder='little')[: ds.Rows * ds.Columns]
sys.stdout.buffer.write(a.astype('<u2').tobytes())`
	out, err := exec.Command(py, "-c", script, path).Output()
	if err != nil {
		t.Fatalf("pydicom and zlib: %v", err)
	}
	inst, img := mustDecode(t, path)
	if inst.TransferSyntaxUID != midsag.DeflatedImageFrameCompression || inst.BitsAllocated != 1 || inst.NumberOfFrames != 3 {
		t.Fatalf("read %s, %d bits, %d frames", inst.TransferSyntaxUID, inst.BitsAllocated, inst.NumberOfFrames)
	}
	if len(out) != 2*len(img.Pix) {
		t.Fatalf("zlib gives %d pixels, midsag %d", len(out)/2, len(img.Pix))
	}
	ones := 0
	for i := range img.Pix {
		v := float32(binary.LittleEndian.Uint16(out[2*i:]))
		if img.Pix[i] != v {
			t.Fatalf("pixel %d = %v, zlib %v", i, img.Pix[i], v)
		}
		ones += int(v)
	}
	if ones == 0 || ones == len(img.Pix) {
		t.Errorf("frame 0 is uniform (%d of %d set): the comparison proves nothing", ones, len(img.Pix))
	}
}

// TestCodecRefusalsCarryNoRuntimeText reads and decodes every real
// sample and pydicom test file: every refusal is a *midsag.Error whose
// text holds no Go runtime wording.
func TestCodecRefusalsCarryNoRuntimeText(t *testing.T) {
	files := append(dicomFiles(t, testtool.RealData(t)), dicomFiles(t, testtool.PydicomTestFiles)...)
	refused := 0
	for _, path := range files {
		inst, err := readFile(t, New(Options{}), path)
		if err == nil {
			_, err = Decode(inst)
		}
		if err == nil {
			continue
		}
		refused++
		if midsag.RefusalOf(err) == nil {
			t.Errorf("%s: %v is not a refusal", path, err)
		}
		for _, s := range runtimeText {
			if strings.Contains(strings.ToLower(err.Error()), s) {
				t.Errorf("%s: message carries %q: %v", path, s, err)
			}
		}
	}
	if refused == 0 {
		t.Error("no file was refused: pydicom's test files include broken ones (MR_truncated.dcm, no_meta.dcm)")
	}
}
