package preprocess

import (
	"encoding/binary"
	"fmt"
	"math"
	"math/rand"
	"os/exec"
	"testing"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/internal/testtool"
)

// TestResizeMatchesPillow compares resize with Pillow's Image.resize with
// the BILINEAR filter on a float ("F") image, down and up, for
// non-square sizes. Pillow accumulates in double and stores float32; we
// allow 1e-4 on values in [0, 1000).
func TestResizeMatchesPillow(t *testing.T) {
	py := testtool.Python(t, "PIL", "numpy")
	rng := rand.New(rand.NewSource(3))
	img := &midsag.Image{Rows: 37, Columns: 53, Pix: make([]float32, 37*53)}
	for i := range img.Pix {
		img.Pix[i] = float32(rng.Intn(1000)) + 0.25
	}
	raw := make([]byte, 4*len(img.Pix))
	for i, v := range img.Pix {
		binary.LittleEndian.PutUint32(raw[4*i:], math.Float32bits(v))
	}
	for _, size := range [][2]int{{20, 31}, {64, 90}, {37, 20}, {11, 128}} {
		h, w := size[0], size[1]
		script := fmt.Sprintf(`import sys, numpy as np
from PIL import Image
a = np.frombuffer(sys.stdin.buffer.read(), dtype='<f4').reshape(37, 53)
b = np.asarray(Image.fromarray(a, mode='F').resize((%d, %d), Image.BILINEAR), dtype='<f4')
sys.stdout.buffer.write(b.tobytes())`, w, h)
		cmd := exec.Command(py, "-c", script)
		stdin, _ := cmd.StdinPipe()
		go func() { stdin.Write(raw); stdin.Close() }()
		out, err := cmd.Output()
		if err != nil {
			t.Fatalf("pillow: %v", err)
		}
		got := resize(img, h, w)
		if len(out) != 4*len(got) {
			t.Fatalf("%dx%d: pillow gave %d bytes", h, w, len(out))
		}
		for i := range got {
			want := math.Float32frombits(binary.LittleEndian.Uint32(out[4*i:]))
			if math.Abs(float64(got[i]-want)) > 1e-4*math.Max(1, math.Abs(float64(want))) {
				t.Fatalf("%dx%d: pixel %d = %v, pillow %v", h, w, i, got[i], want)
			}
		}
	}
}

// TestStackLayoutsAndOrientation builds the same stack from a series and
// from its mirror image stored with flipped row direction and reversed
// normal: the canonical view (PS3.3 C.7.6.2.1.1 directions) must make them
// equal, and NHWC must hold the NCHW values transposed.
func TestStackLayoutsAndOrientation(t *testing.T) {
	const rows, cols, n = 20, 30, 5
	mk := func(flip bool) *Slices {
		se := &midsag.Series{}
		images := map[*midsag.Instance]*midsag.Image{}
		iop := [6]float64{0, 1, 0, 0, 0, -1}
		if flip {
			iop = [6]float64{0, -1, 0, 0, 0, -1}
		}
		for k := 0; k < n; k++ {
			in := &midsag.Instance{SOPInstanceUID: fmt.Sprint(k), Rows: rows, Columns: cols, ImageOrientation: iop, PixelSpacing: [2]float64{1, 1},
				ImagePosition: [3]float64{float64(k), 0, 0}, HasGeometry: true}
			img := &midsag.Image{Rows: rows, Columns: cols, Pix: make([]float32, rows*cols)}
			for y := 0; y < rows; y++ {
				for x := 0; x < cols; x++ {
					sx := x
					if flip {
						sx = cols - 1 - x
					}
					img.Pix[y*cols+x] = float32(100*k + 3*y + sx)
				}
			}
			se.Instances = append(se.Instances, in)
			images[in] = img
		}
		s, err := SortSlices(se)
		if err != nil {
			t.Fatal(err)
		}
		for _, in := range s.Instances {
			s.Images = append(s.Images, images[in])
		}
		s.Center = 2
		return s
	}
	spec := midsag.InputSpec{Layout: "NCHW", Height: 32, Width: 32, Slices: 3, SliceStep: 1, Normalize: "percentile", PercentileLow: 0, PercentileHigh: 100}
	a, _, err := Stack(mk(false), spec)
	if err != nil {
		t.Fatal(err)
	}
	b, _, err := Stack(mk(true), spec)
	if err != nil {
		t.Fatal(err)
	}
	// Flipping the row direction reverses the normal (row x column), which
	// reverses channel order; the canonical view undoes both.
	for i := range a.Data {
		if math.Abs(float64(a.Data[i]-b.Data[i])) > 1e-6 {
			t.Fatalf("flipped series differs at %d: %v vs %v", i, a.Data[i], b.Data[i])
		}
	}
	spec.Layout = "NHWC"
	c, _, err := Stack(mk(false), spec)
	if err != nil {
		t.Fatal(err)
	}
	if fmt.Sprint(c.Shape) != "[1 32 32 3]" || fmt.Sprint(a.Shape) != "[1 3 32 32]" {
		t.Fatalf("shapes %v %v", a.Shape, c.Shape)
	}
	for ch := 0; ch < 3; ch++ {
		for p := 0; p < 32*32; p++ {
			if a.Data[ch*1024+p] != c.Data[p*3+ch] {
				t.Fatalf("NHWC differs from NCHW at channel %d pixel %d", ch, p)
			}
		}
	}
	// Aspect kept: a 20x30 mm image in 32x32 is 21 rows tall, centred, so
	// the first 5 rows are padding (0 after percentile scaling).
	for x := 0; x < 32; x++ {
		if a.Data[x] != 0 || a.Data[4*32+x] != 0 {
			t.Fatalf("top rows are not padding")
		}
	}
	if a.Data[16*32+16] == 0 {
		t.Fatalf("centre is padding")
	}
}
