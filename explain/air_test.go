package explain

import "testing"

// TestAirMaskIsOutsideTheBody checks airMask on a hand-made 3 x 32 x 32
// input: a bright body in columns 8..23 holding a dark 6 x 6 hole (a flow
// void or cortical bone), dark air left and right with one bright noise
// pixel in it. Air is what lies below the threshold (Smith 2002, 10% from
// the 2nd to the 98th percentile) and connects to the border: the hole
// is not air, the noise pixel is not air, the rest outside the body is.
func TestAirMaskIsOutsideTheBody(t *testing.T) {
	const h, w = 32, 32
	lay := layout{c: 3, h: h, w: w}
	in := make([]float32, 3*h*w)
	for c := 0; c < 3; c++ {
		for y := 0; y < h; y++ {
			for x := 8; x < 24; x++ {
				in[lay.at(c, y, x)] = 0.8
			}
		}
		for y := 12; y < 18; y++ {
			for x := 13; x < 19; x++ {
				in[lay.at(c, y, x)] = 0.01
			}
		}
		in[lay.at(c, 5, 2)] = 0.9 // noise in the air
	}
	air := airMask(in, lay, DefaultAirFraction)
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			want := (x < 8 || x >= 24) && !(y == 5 && x == 2)
			if air[y*w+x] != want {
				t.Errorf("pixel (%d,%d): air %v, want %v", y, x, air[y*w+x], want)
			}
		}
	}
	hole := Patch{Y0: 12, X0: 13, Y1: 18, X1: 19}
	left := Patch{Y0: 10, X0: 0, Y1: 20, X1: 8}
	noisy := Patch{Y0: 0, X0: 0, Y1: 8, X1: 8}
	if onAir(air, w, hole) || !onAir(air, w, left) || onAir(air, w, noisy) || onAir(nil, w, left) {
		t.Errorf("onAir: hole %v, left %v, noisy %v, no mask %v; want false, true, false, false",
			onAir(air, w, hole), onAir(air, w, left), onAir(air, w, noisy), onAir(nil, w, left))
	}
}
