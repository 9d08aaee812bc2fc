package preprocess

import (
	"bytes"
	"context"
	"testing"

	"github.com/suyashkumar/dicom"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/phantom"
)

// benchStudy is one phantom study with its four decoy series (about 50
// files), in Explicit VR Little Endian.
func benchStudy(b *testing.B) []phantom.File {
	b.Helper()
	files, _, err := phantom.GenerateStudy(phantom.Options{Studies: 1, Seed: 77,
		Syntaxes: []string{midsag.ExplicitVRLittleEndian}}, 0)
	if err != nil {
		b.Fatal(err)
	}
	return files
}

// BenchmarkStudyParseBaseline parses every file of the study with the
// DICOM library alone (github.com/suyashkumar/dicom, pixel data skipped):
// the floor that Read, which adds limits, the element scan and attribute
// extraction, is compared against (bench/study.sh prints the ratio).
func BenchmarkStudyParseBaseline(b *testing.B) {
	files := benchStudy(b)
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		for _, f := range files {
			if _, err := dicom.Parse(bytes.NewReader(f.Data), int64(len(f.Data)), nil, dicom.SkipPixelData()); err != nil {
				b.Fatal(err)
			}
		}
	}
	b.ReportMetric(float64(len(files)), "files")
}

// BenchmarkStudyReadHeaders reads every file of the study with Read
// (headers parsed, pixel data kept undecoded).
func BenchmarkStudyReadHeaders(b *testing.B) {
	files := benchStudy(b)
	pre := New(Options{})
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		for _, f := range files {
			if _, err := pre.Read(f.Name, bytes.NewReader(f.Data)); err != nil {
				b.Fatal(err)
			}
		}
	}
	b.ReportMetric(float64(len(files)), "files")
}

func readAll(b *testing.B, files []phantom.File) []*midsag.Instance {
	pre := New(Options{})
	var insts []*midsag.Instance
	for _, f := range files {
		in, err := pre.Read(f.Name, bytes.NewReader(f.Data))
		if err != nil {
			b.Fatal(err)
		}
		insts = append(insts, in)
	}
	return insts
}

// BenchmarkSeriesDecodeBaseline decodes the pixels of the T2 series only:
// the floor that preparing the study is compared against.
func BenchmarkSeriesDecodeBaseline(b *testing.B) { benchDecode(b, benchStudy(b)) }

// BenchmarkStudyPrepare runs Prepare on the read study: series pick, slice
// sort, decoding the picked series, midline scoring and the 3x128x128 stack.
func BenchmarkStudyPrepare(b *testing.B) { benchPrepare(b, benchStudy(b), 128) }

// BenchmarkStudyPrepare512 is BenchmarkStudyPrepare on a study whose
// sagittal series have a 512 x 512 matrix, stacked at 3 x 512 x 512: the
// size of a ResNet-50 input at 512 (bench/study.sh compares it with the
// decode floor, BenchmarkSeriesDecodeBaseline512).
func BenchmarkStudyPrepare512(b *testing.B) { benchPrepare(b, benchStudy512(b), 512) }

// BenchmarkSeriesDecodeBaseline512 decodes the T2 series of the 512
// study only.
func BenchmarkSeriesDecodeBaseline512(b *testing.B) { benchDecode(b, benchStudy512(b)) }

// benchDecode decodes the pixels of the study's T2 series.
func benchDecode(b *testing.B, files []phantom.File) {
	insts := readAll(b, files)
	se, _, _, err := PickSeries(Group(insts)[0], 3)
	if err != nil {
		b.Fatal(err)
	}
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		for _, in := range se.Instances {
			if _, err := Decode(in); err != nil {
				b.Fatal(err)
			}
		}
	}
}

// benchPrepare runs Prepare on the study with a 3 x size x size stack.
func benchPrepare(b *testing.B, files []phantom.File, size int) {
	insts := readAll(b, files)
	spec := midsag.InputSpec{Layout: "NCHW", Height: size, Width: size, Slices: 3, SliceStep: 1,
		Normalize: "percentile", PercentileLow: 1, PercentileHigh: 99}
	pre := New(Options{})
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := pre.Prepare(context.Background(), insts, spec); err != nil {
			b.Fatal(err)
		}
	}
}

// benchStudy512 is benchStudy with 512 x 512 sagittal series.
func benchStudy512(b *testing.B) []phantom.File {
	b.Helper()
	files, _, err := phantom.GenerateStudy(phantom.Options{Studies: 1, Seed: 77, Matrix: 512,
		Syntaxes: []string{midsag.ExplicitVRLittleEndian}}, 0)
	if err != nil {
		b.Fatal(err)
	}
	return files
}
