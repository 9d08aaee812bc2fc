package crossphantom

import (
	"fmt"
	"image"
	"image/png"
	"os"
	"path/filepath"
	"testing"
)

// TestLook writes PNGs of the midline slice and of slices 4 and 8 mm
// lateral, at 1 mm and 4 mm thickness, for a person to look at. It runs
// only when MIDSAG_CROSSPHANTOM_PNG names a folder:
//
//	MIDSAG_CROSSPHANTOM_PNG=/tmp/xp go test -run TestLook ./internal/crossphantom
func TestLook(t *testing.T) {
	dir := os.Getenv("MIDSAG_CROSSPHANTOM_PNG")
	if dir == "" {
		t.Skip("set MIDSAG_CROSSPHANTOM_PNG to a folder to write the images")
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		t.Fatal(err)
	}
	for _, study := range []int{0, 1, 2} {
		for _, thick := range []float64{1, 4} {
			for _, off := range []float64{0, 4, 8, -8} {
				pl, err := plan(DefaultConfig(3), study)
				if err != nil {
					t.Fatal(err)
				}
				img := pl.sliceAt(off, thick)
				name := filepath.Join(dir, fmt.Sprintf("s%d_t%g_off%+g.png", study, thick, off))
				if err := writePNG(name, img, pl.s.rows, pl.s.cols); err != nil {
					t.Fatal(err)
				}
			}
		}
	}
	// The middle file of each distractor series, as written: the last
	// rows×columns×2 bytes of a file are its Pixel Data.
	cfg := DefaultConfig(3)
	cfg.DistractorRate = 1
	files, tr, err := Study(cfg, 0)
	if err != nil {
		t.Fatal(err)
	}
	bySeries := map[string][]File{}
	for _, f := range files {
		s := filepath.Dir(f.Name)
		bySeries[s] = append(bySeries[s], f)
	}
	for s, fs := range bySeries {
		rows, cols := tr.Rows, tr.Columns
		if len(fs) == 10 {
			rows, cols = 192, 192 // the axial series
		}
		d := fs[len(fs)/2].Data
		px := make([]uint16, rows*cols)
		for i := range px {
			o := len(d) - 2*len(px) + 2*i
			px[i] = uint16(d[o]) | uint16(d[o+1])<<8
		}
		if err := writePNG(filepath.Join(dir, "series_"+s+".png"), px, rows, cols); err != nil {
			t.Fatal(err)
		}
	}
}

// sliceAt renders one slice whose plane is off mm from the truth plane
// at the cord, with the given thickness.
func (pl *studyPlan) sliceAt(off, thick float64) []uint16 {
	s := *pl.s
	s.thickness = thick
	p0 := s.positions[0]
	d0 := p0.sub(pl.c).dot(s.normal)
	s.positions = []vec{p0.add(s.normal.scale(off - d0))}
	px := make([]uint16, s.rows*s.cols)
	s.render(pl.nk, 0, pl.noise, px)
	return px
}

// writePNG writes 12-bit pixels as an 8-bit grey PNG, windowed at the
// 99.5th percentile.
func writePNG(name string, px []uint16, rows, cols int) error {
	var hist [4096]int
	for _, v := range px {
		hist[v]++
	}
	top, n := 4095, 0
	for top > 0 && n < len(px)/200 {
		n += hist[top]
		top--
	}
	img := image.NewGray(image.Rect(0, 0, cols, rows))
	for i, v := range px {
		img.Pix[i] = uint8(min(255, int(v)*255/max(top, 1)))
	}
	f, err := os.Create(name)
	if err != nil {
		return err
	}
	if err := png.Encode(f, img); err != nil {
		f.Close()
		return err
	}
	return f.Close()
}
