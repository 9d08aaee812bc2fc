package main

import (
	"context"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strconv"
	"strings"

	"github.com/midsag/midsag/models"
)

// floatList is a comma-separated list of numbers as a flag value.
type floatList []float64

func (l *floatList) String() string {
	s := make([]string, len(*l))
	for i, v := range *l {
		s[i] = strconv.FormatFloat(v, 'g', -1, 64)
	}
	return strings.Join(s, ",")
}

func (l *floatList) Set(v string) error {
	*l = nil
	for _, p := range strings.Split(v, ",") {
		f, err := strconv.ParseFloat(strings.TrimSpace(p), 64)
		if err != nil {
			return fmt.Errorf("%q is not a number", p)
		}
		*l = append(*l, f)
	}
	return nil
}

// stringList is a comma-separated list of names as a flag value.
type stringList []string

func (l *stringList) String() string { return strings.Join(*l, ",") }

func (l *stringList) Set(v string) error {
	*l = strings.Split(v, ",")
	return nil
}

// initFlags registers the flags of "model init" onto o.
func initFlags(fs *flag.FlagSet, o *models.InitOptions, pct, mean, std *floatList, labels *stringList) {
	fs.StringVar(&o.Name, "name", "", "model name (default: the file name without .onnx)")
	fs.StringVar(&o.Version, "version", models.DefaultVersion, "model version")
	fs.StringVar(&o.Description, "description", "", "what the model does, in a sentence")
	fs.StringVar(&o.IntendedUse, "intended-use", "", "who may use the output and for what")
	fs.StringVar(&o.TrainingCohort, "training-cohort", "", "the data the model was trained on")
	fs.StringVar(&o.Input, "input", "", "input tensor `name` (default: the model's only input)")
	fs.StringVar(&o.Output, "output", "", "output tensor `name` (default: the model's only output)")
	fs.StringVar(&o.Layout, "layout", "", "NCHW or NHWC (default: read from the input's shape, the small axis being the slices)")
	fs.IntVar(&o.Slices, "slices", 0, "adjacent sagittal slices stacked as channels, odd (default: from the input's shape)")
	fs.IntVar(&o.Height, "height", 0, "input height in pixels (default: from the input's shape)")
	fs.IntVar(&o.Width, "width", 0, "input width in pixels (default: from the input's shape)")
	fs.IntVar(&o.SliceStep, "slice-step", 1, "distance between stacked slices, in slices of the series")
	fs.Float64Var(&o.PixelSpacingMM, "spacing-mm", 0, "resample to this isotropic in-plane spacing in mm first (0: scale the slice to fit, aspect kept)")
	fs.StringVar(&o.Normalize, "normalize", "percentile", "percentile (clip to --percentiles, scale to [0,1]) or meanstd (that, then (x-mean)/std per slice)")
	fs.Var(pct, "percentiles", "`low,high` percentiles of the stack clipped to and scaled to [0,1], for both normalize modes")
	fs.Var(mean, "mean", "meanstd: `m1,m2,...` one mean per slice on the [0,1] scale, or one for all")
	fs.Var(std, "std", "meanstd: `s1,s2,...` one std per slice on the [0,1] scale, or one for all")
	fs.StringVar(&o.OutputKind, "output-kind", "", "logit ([N,1]), probability ([N,1] after a sigmoid), softmax ([N,2] after a softmax) or logits ([N,2]) (default: from the output's width and last operator)")
	fs.IntVar(&o.PositiveIndex, "positive-index", -1, "column of the positive class in an [N,2] output (default 1)")
	fs.Var(labels, "labels", "`negative,positive` decision names")
	fs.Float64Var(&o.Threshold, "threshold", models.DefaultThreshold, "decision threshold on the calibrated probability")
}

func runModelInit(_ context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlags("model init", "MODEL.onnx",
		"Writes MODEL.manifest.json beside the model from the model's own input and\n"+
			"output declarations and the flags below (docs/MANIFEST.md), then loads the\n"+
			"model with ONNX Runtime to check it. Nothing is written if the check fails.", stderr)
	var (
		o              models.InitOptions
		pct, mean, std floatList
		labels         stringList
		out            = fs.String("out", "", "manifest `path` (default: MODEL.manifest.json beside the model)")
		force          = fs.Bool("force", false, "replace an existing manifest")
		ortLib         = fs.String("ort-lib", "", "path of libonnxruntime.so.1 (default: searched)")
	)
	initFlags(fs, &o, &pct, &mean, &std, &labels)
	pos, err := parseInterspersed(fs, args)
	if err != nil {
		return err
	}
	if len(pos) != 1 {
		return usagef("model init: want exactly one MODEL.onnx, got %d arguments", len(pos))
	}
	if len(pct) != 0 && len(pct) != 2 {
		return usagef("model init: --percentiles wants low,high, got %d numbers", len(pct))
	}
	if len(pct) == 2 {
		o.PercentileLow, o.PercentileHigh = pct[0], pct[1]
	}
	o.Mean, o.Std, o.Labels = mean, std, labels
	path := pos[0]
	dest := *out
	if dest == "" {
		dest = models.SidecarPath(path)
	}
	if _, err := os.Stat(dest); err == nil && !*force {
		return usagef("model init: %s exists; pass --force to replace it", dest)
	} else if err != nil && !errors.Is(err, os.ErrNotExist) {
		return fmt.Errorf("model init: %w", err)
	}
	data, err := os.ReadFile(path)
	if err != nil {
		return fmt.Errorf("model init: %w", err)
	}
	man, warnings, err := models.InitManifest(path, data, o)
	if err != nil {
		return fmt.Errorf("model init %s: %w", path, err)
	}
	for _, w := range warnings {
		fmt.Fprintf(stderr, "midsag: warning: %s\n", w)
	}
	js, err := json.MarshalIndent(man, "", "  ")
	if err != nil {
		return fmt.Errorf("model init: %w", err)
	}
	js = append(js, '\n')
	if err := checkLoads(path, data, js, *ortLib); err != nil {
		return err
	}
	if err := writeAtomic(dest, js); err != nil {
		return fmt.Errorf("model init: %w", err)
	}
	fmt.Fprintf(stdout, "wrote %s\n%s", dest, js)
	fmt.Fprintf(stdout, "next: midsag model inspect %s\n", path)
	return nil
}

// parseInterspersed parses flags given before and after the positional
// arguments ("model init MODEL.onnx --slices 5"), which the flag package
// alone stops at, and returns the positional arguments.
func parseInterspersed(fs *flag.FlagSet, args []string) ([]string, error) {
	var pos []string
	for {
		if err := parseFlags(fs, args); err != nil {
			return nil, err
		}
		rest := fs.Args()
		if len(rest) == 0 {
			return pos, nil
		}
		if rest[0] == "--" {
			return append(pos, rest[1:]...), nil
		}
		pos, args = append(pos, rest[0]), rest[1:]
	}
}

// checkLoads loads the model with the new manifest as its sidecar, so a
// manifest ONNX Runtime would refuse is never written.
func checkLoads(path string, onnx, manifest []byte, ortLib string) error {
	lib, err := models.FindLibrary(ortLib)
	if err == nil {
		err = models.Init(lib)
	}
	if err != nil {
		return fmt.Errorf("model init: cannot check the model with ONNX Runtime: %w", err)
	}
	m, err := models.LoadBytes(filepath.Base(path), onnx, manifest, models.Options{IntraOpThreads: 1})
	if err != nil {
		return fmt.Errorf("model init: the manifest does not fit the model: %w", err)
	}
	return m.Close()
}

// writeAtomic writes data to path through a temporary file in the same
// folder, so a failed write leaves no partial manifest.
func writeAtomic(path string, data []byte) error {
	f, err := os.CreateTemp(filepath.Dir(path), ".manifest-*")
	if err != nil {
		return err
	}
	if _, err := f.Write(data); err != nil {
		f.Close()
		os.Remove(f.Name())
		return err
	}
	if err := f.Close(); err != nil {
		os.Remove(f.Name())
		return err
	}
	if err := os.Rename(f.Name(), path); err != nil {
		os.Remove(f.Name())
		return err
	}
	return nil
}
