package codec_test

import (
	"fmt"

	"github.com/midsag/midsag/preprocess/codec"
)

// ExampleEncodeJPEGLossless codes a 3x2 image with predictor 1 and decodes it
// again; JPEG lossless (ITU-T T.81 Annex H) returns the samples unchanged.
func ExampleEncodeJPEGLossless() {
	samples := []uint16{100, 101, 103, 4095, 0, 2048}
	stream, err := codec.EncodeJPEGLossless(samples, 3, 2, 12)
	if err != nil {
		fmt.Println(err)
		return
	}
	img, err := codec.DecodeJPEGLossless(stream)
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Println(img.Width, img.Height, img.Precision, img.Samples)
	// Output: 3 2 12 [100 101 103 4095 0 2048]
}

// ExampleDecodeRLE decodes a frame of one 8-bit segment holding the PackBits
// code FD 07 (PS3.5 G.3.2: repeat 07 four times) and its pad byte.
func ExampleDecodeRLE() {
	frame := make([]byte, 64, 66)
	frame[0], frame[4] = 1, 64 // one segment, starting right after the header (PS3.5 G.5)
	frame = append(frame, 0xFD, 0x07)
	pixels, err := codec.DecodeRLE(frame, 2, 2, 1, 8)
	fmt.Println(pixels, err)
	// Output: [7 7 7 7] <nil>
}
