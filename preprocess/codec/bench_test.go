package codec

import (
	"math"
	"testing"
)

// phantom512 returns a deterministic 512x512 image of 12-bit values: smooth
// structure plus a little noise, roughly like an MR slice.
func phantom512() []uint16 {
	const n = 512
	s := make([]uint16, n*n)
	seed := uint32(1)
	for y := range n {
		for x := range n {
			seed = seed*1664525 + 1013904223
			v := 1500 + 900*math.Sin(float64(x)/40)*math.Cos(float64(y)/55) + float64(seed>>28)
			s[y*n+x] = uint16(v)
		}
	}
	return s
}

// BenchmarkDecodeJPEGLossless512 decodes a 512x512 16-bit-container frame
// coded with predictor 1.
func BenchmarkDecodeJPEGLossless512(b *testing.B) {
	enc, err := EncodeJPEGLossless(phantom512(), 512, 512, 16)
	if err != nil {
		b.Fatal(err)
	}
	b.SetBytes(512 * 512 * 2)
	for b.Loop() {
		if _, err := DecodeJPEGLossless(enc); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkDecodeRLE512 decodes a 512x512 16-bit RLE Lossless frame.
func BenchmarkDecodeRLE512(b *testing.B) {
	enc, err := EncodeRLE(samplesLE(phantom512()), 512, 512, 1, 16)
	if err != nil {
		b.Fatal(err)
	}
	b.SetBytes(512 * 512 * 2)
	for b.Loop() {
		if _, err := DecodeRLE(enc, 512, 512, 1, 16); err != nil {
			b.Fatal(err)
		}
	}
}
