package explain

import (
	"context"
	"os"
	"strconv"
	"testing"

	"github.com/midsag/midsag/models"
)

// BenchmarkResNet50 times exhaustive (every patch, and air skipped),
// coarse-to-fine and sparse 16 x 16 maps of a
// ResNet-50-sized model (3 x 512 x 512 in, one logit out; random weights,
// built offline by bench/make-resnet50.py with torchvision, not
// committed) on one phantom study, reporting model runs per map. It needs
// MIDSAG_RESNET50=/path/model.onnx with its sidecar manifest and is
// skipped without it:
//
//	/usr/bin/python3 bench/make-resnet50.py /tmp/midsag-resnet50.onnx
//	MIDSAG_RESNET50=/tmp/midsag-resnet50.onnx go test -run '^$' -bench ResNet50 -benchtime 1x ./explain
func BenchmarkResNet50(b *testing.B) {
	m := resnet50(b)
	c := phantomCases(b, m, 4242, 1)[0]
	for _, bc := range []struct {
		name string
		opts Options
	}{
		{"exhaustive_every_patch", Options{Mode: ModeExhaustive, AirFraction: -1}},
		{"exhaustive", Options{Mode: ModeExhaustive}},
		{"coarse_to_fine_l3_q0.75", Options{Mode: ModeCoarseToFine, Levels: 3, RefineQuantile: 0.75}},
		{"coarse_to_fine_l3_q0.875", Options{Mode: ModeCoarseToFine, Levels: 3, RefineQuantile: 0.875}},
		{"sparse", Options{Mode: ModeSparse}},
	} {
		b.Run(bc.name, func(b *testing.B) {
			var runs int
			for b.Loop() {
				mp, err := New(bc.opts).Compute(context.Background(), m, c.prep.Input, c.raw)
				if err != nil {
					b.Fatal(err)
				}
				runs = mp.Runs + 1
			}
			b.ReportMetric(float64(runs), "model_runs")
		})
	}
}

// BenchmarkResNet50Batch times one sparse map of the ResNet-50-sized
// model at each number of occluded copies per Predict call, so the
// default batch (DefaultBatchSize) is chosen by measurement:
// bench/explain-batch.sh prints each time as a ratio of batch 1's,
// measured in the same run. Needs MIDSAG_RESNET50, as BenchmarkResNet50.
func BenchmarkResNet50Batch(b *testing.B) {
	m := resnet50(b)
	c := phantomCases(b, m, 4242, 1)[0]
	for _, n := range []int{1, 2, 4, 8, 16} {
		b.Run("batch_"+strconv.Itoa(n), func(b *testing.B) {
			var runs int
			for b.Loop() {
				mp, err := New(Options{Mode: ModeSparse, BatchSize: n}).Compute(context.Background(), m, c.prep.Input, c.raw)
				if err != nil {
					b.Fatal(err)
				}
				runs = mp.Runs + 1
			}
			b.ReportMetric(float64(runs), "model_runs")
		})
	}
}

// resnet50 loads the model MIDSAG_RESNET50 names, or skips.
func resnet50(b *testing.B) *models.Model {
	b.Helper()
	path := os.Getenv("MIDSAG_RESNET50")
	if path == "" {
		b.Skip("set MIDSAG_RESNET50 to a ResNet-50-sized ONNX model")
	}
	if _, err := os.Stat(path); err != nil {
		b.Skipf("MIDSAG_RESNET50: %v", err)
	}
	needORT(b)
	m, err := models.Load(path, models.Options{})
	if err != nil {
		b.Fatal(err)
	}
	b.Cleanup(func() { m.Close() })
	return m
}
