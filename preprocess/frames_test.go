package preprocess

import (
	"bytes"
	"encoding/binary"
	"strconv"
	"strings"
	"testing"

	"github.com/midsag/midsag"
)

// item is a defined-length sequence item (PS3.5 7.5.1) holding parts.
func item(parts ...[]byte) []byte {
	v := bytes.Join(parts, nil)
	b := []byte{0xFE, 0xFF, 0x00, 0xE0}
	b = binary.LittleEndian.AppendUint32(b, uint32(len(v)))
	return append(b, v...)
}

func seq(group, el uint16, items ...[]byte) []byte {
	return elem(group, el, "SQ", bytes.Join(items, nil))
}

func ds(s string) []byte {
	if len(s)%2 == 1 {
		s += " "
	}
	return []byte(s)
}

// enhancedFile builds a small Enhanced MR instance by hand: 4 x 4 pixels,
// frames frames, per-frame items given; shared Plane Orientation, Plane
// Position and Pixel Measures.
func enhancedFile(frames int, perFrame [][]byte, pixelBytes int) []byte {
	shared := item(
		seq(0x0020, 0x9116, item(elem(0x0020, 0x0037, "DS", ds(`0\1\0\0\0\-1`)))),
		seq(0x0020, 0x9113, item(elem(0x0020, 0x0032, "DS", ds(`0\0\0`)))),
		seq(0x0028, 0x9110, item(elem(0x0018, 0x0050, "DS", ds("3")), elem(0x0028, 0x0030, "DS", ds(`0.5\0.5`)))),
	)
	body := bytes.Join([][]byte{
		elem(0x0008, 0x0016, "UI", []byte(midsag.EnhancedMRImageStorage+"\x00")),
		elem(0x0008, 0x0018, "UI", []byte("1.2.3.4\x00")),
		elem(0x0028, 0x0002, "US", us(1)),
		elem(0x0028, 0x0004, "CS", ds("MONOCHROME2")),
		elem(0x0028, 0x0008, "IS", ds(strconv.Itoa(frames))),
		elem(0x0028, 0x0010, "US", us(4)),
		elem(0x0028, 0x0011, "US", us(4)),
		elem(0x0028, 0x0100, "US", us(16)),
		elem(0x0028, 0x0101, "US", us(16)),
		elem(0x0028, 0x0102, "US", us(15)),
		elem(0x0028, 0x0103, "US", us(0)),
		seq(0x5200, 0x9229, shared),
		seq(0x5200, 0x9230, perFrame...),
		elem(0x7FE0, 0x0010, "OW", make([]byte, pixelBytes)),
	}, nil)
	return part10File(body)
}

func framePos(x string) []byte {
	return seq(0x0020, 0x9113, item(elem(0x0020, 0x0032, "DS", ds(x+`\0\0`))))
}

// TestFunctionalGroupsOverride checks PS3.3 C.7.6.16: a frame's
// Per-frame Functional Groups item overrides the Shared one, macro by
// macro, and a frame without its own macro takes the shared value.
func TestFunctionalGroupsOverride(t *testing.T) {
	per := [][]byte{
		item(framePos("2")),
		item(),
		item(framePos("6"), seq(0x0028, 0x9110, item(elem(0x0018, 0x0050, "DS", ds("4")), elem(0x0028, 0x0030, "DS", ds(`0.7\0.7`))))),
	}
	in, err := New(Options{}).Read("x", bytes.NewReader(enhancedFile(3, per, 3*32)))
	if err != nil {
		t.Fatal(err)
	}
	fr := in.Frames()
	if len(fr) != 3 {
		t.Fatalf("%d frames", len(fr))
	}
	for i, want := range []struct {
		x, thick, spacing float64
	}{{2, 3, 0.5}, {0, 3, 0.5}, {6, 4, 0.7}} {
		f := fr[i]
		if !f.HasGeometry || f.ImagePosition[0] != want.x || f.SliceThickness != want.thick || f.PixelSpacing[0] != want.spacing || f.ImageOrientation[1] != 1 {
			t.Errorf("frame %d: %+v", i+1, f)
		}
		if _, err := Decode(f); err != nil {
			t.Errorf("frame %d: %v", i+1, err)
		}
	}
}

// TestFunctionalGroupsBadInput: a Per-frame Functional Groups Sequence
// with fewer items than frames, and native pixel data shorter than its
// frames, are refused with reason codes, never a panic.
func TestFunctionalGroupsBadInput(t *testing.T) {
	_, err := New(Options{}).Read("x", bytes.NewReader(enhancedFile(3, [][]byte{item(), item()}, 3*32)))
	if r, _ := midsag.ReasonOf(err); r != midsag.ReasonInconsistentGeometry {
		t.Errorf("2 items for 3 frames: %v", err)
	}
	in, err := New(Options{}).Read("x", bytes.NewReader(enhancedFile(3, [][]byte{item(), item(), item()}, 2*32)))
	if err != nil {
		t.Fatal(err)
	}
	fr := in.Frames()
	if _, err := Decode(fr[1]); err != nil {
		t.Errorf("frame 2 of a 2-frame-long pixel data: %v", err)
	}
	_, err = Decode(fr[2])
	if r, _ := midsag.ReasonOf(err); r != midsag.ReasonTruncated || strings.Contains(err.Error(), "runtime") {
		t.Errorf("frame 3 past the pixel data: %v", err)
	}
	c := *fr[2]
	c.Frame = 7
	if _, err := Decode(&c); err == nil {
		t.Errorf("frame 8 of 3 decoded")
	}
}
