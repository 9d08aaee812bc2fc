package preprocess

import (
	"encoding/binary"
	"math"
	"os/exec"
	"testing"

	"github.com/midsag/midsag/internal/testtool"
)

// pydicomModality returns pydicom's pixel_array with its modality LUT
// applied (pydicom.pixel_data_handlers.util.apply_modality_lut, which
// implements PS3.3 C.11.1), as float64.
func pydicomModality(t *testing.T, path string) []float64 {
	t.Helper()
	py := testtool.Python(t, "pydicom", "numpy")
	script := `import sys, pydicom
from pydicom.pixel_data_handlers.util import apply_modality_lut
ds = pydicom.dcmread(sys.argv[1])
a = apply_modality_lut(ds.pixel_array, ds).astype('<f8')
sys.stdout.buffer.write(a.tobytes())`
	out, err := exec.Command(py, "-c", script, path).Output()
	if err != nil {
		t.Fatalf("pydicom on %s: %v", path, err)
	}
	v := make([]float64, len(out)/8)
	for i := range v {
		v[i] = math.Float64frombits(binary.LittleEndian.Uint64(out[8*i:]))
	}
	return v
}

// TestModalityValuesMatchPydicom compares decoded values with pydicom's
// for files that exercise Pixel Representation 1 and Rescale
// Slope/Intercept (CT_small.dcm: signed, intercept set) and plain MR.
func TestModalityValuesMatchPydicom(t *testing.T) {
	for _, name := range []string{"CT_small.dcm", "MR_small.dcm", "MR_small_bigendian.dcm"} {
		path := testtool.PydicomFile(t, name)
		want := pydicomModality(t, path)
		_, img := mustDecode(t, path)
		if len(want) != len(img.Pix) {
			t.Fatalf("%s: %d values, pydicom %d", name, len(img.Pix), len(want))
		}
		for i := range want {
			if math.Abs(float64(img.Pix[i])-want[i]) > 1e-3*math.Max(1, math.Abs(want[i])) {
				t.Fatalf("%s: pixel %d = %v, pydicom %v", name, i, img.Pix[i], want[i])
			}
		}
	}
}

// TestMonochrome1Inverted checks PS3.3 C.7.6.3.1.2: in MONOCHROME1 the
// minimum sample value is displayed white, so after decoding, which makes
// higher always brighter, the values are mirrored within the stored range.
// The MONOCHROME1 copy of MR_small.dcm is made with DCMTK's dcmodify.
func TestMonochrome1Inverted(t *testing.T) {
	src := testtool.PydicomFile(t, "MR_small.dcm")
	inst, want := mustDecode(t, src)
	m1 := t.TempDir() + "/m1.dcm"
	testtool.Run(t, "dcmconv", src, m1)
	testtool.Run(t, "dcmodify", "-nb", "-m", "(0028,0004)=MONOCHROME1", m1)
	_, got := mustDecode(t, m1)
	// MR_small is 16 bits stored, signed: stored range -32768..32767, so
	// the mirror of v is -1 - v.
	if inst.PixelRepresentation != 1 || inst.BitsStored != 16 {
		t.Fatalf("MR_small.dcm: pixel representation %d, bits stored %d; test assumes 1 and 16", inst.PixelRepresentation, inst.BitsStored)
	}
	for i := range want.Pix {
		if got.Pix[i] != -1-want.Pix[i] {
			t.Fatalf("pixel %d: %v, want %v", i, got.Pix[i], -1-want.Pix[i])
		}
	}
}
