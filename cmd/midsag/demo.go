package main

import (
	"context"
	"fmt"
	"io"
	"path/filepath"

	"github.com/midsag/midsag/phantom"
	"github.com/midsag/midsag/pipeline"
)

func init() {
	register("demo", "make a synthetic study, score it with the bundled demo model, write result.json and heatmap.png", runDemo)
}

func runDemo(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlags("demo", "", "Writes one synthetic cervical MRI study (a phantom with decoy series) into\n"+
		"OUT/study, scores it with the bundled demo model and writes OUT/result.json with\n"+
		"an occlusion map, OUT/heatmap.png and OUT/heatmap.dcm.", stderr)
	var mf modelFlags
	mf.register(fs)
	out := fs.String("out", "demo-out", "output `folder`")
	seed := fs.Int64("seed", 2026, "phantom seed")
	asJSON := fs.Bool("json", false, "print the result as JSON instead of a summary")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if fs.NArg() != 0 {
		return usagef("demo takes no arguments")
	}
	studyDir := filepath.Join(*out, "study")
	truths, err := phantom.GenerateContext(ctx, studyDir, phantom.Options{Studies: 1, Seed: *seed})
	if err != nil {
		return fmt.Errorf("make phantom study: %w", err)
	}
	// Score the study's own folder: labels.csv and truth.json beside it
	// are the phantom's answers, not DICOM.
	cfg := pipeline.Config{Model: mf.config(), Explain: true}
	res, err := scoreStudy(ctx, cfg, []string{filepath.Join(studyDir, "study-0000")})
	if err != nil {
		return reportRejection(err, *asJSON, stderr)
	}
	path := filepath.Join(*out, "result.json")
	if err := writeJSONFile(path, res); err != nil {
		return err
	}
	if err := writeHeatmaps(*out, res); err != nil {
		return err
	}
	if *asJSON {
		return printJSON(stdout, res)
	}
	printSummary(stdout, res)
	t := truths[0]
	truth := "no compression"
	if t.Compression {
		truth = "compression at " + t.Level
	}
	fmt.Fprintf(stdout, "\nphantom truth: %s; midline slice %d (slab offset %.1f slices)\n", truth, t.CenterIndex+1, t.SlabOffsetSlices)
	fmt.Fprintf(stdout, "wrote %s, %s and the study under %s\n", path, filepath.Join(*out, "heatmap.png"), studyDir)
	return nil
}
