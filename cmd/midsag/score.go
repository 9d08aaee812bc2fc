package main

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/explain"
	"github.com/midsag/midsag/inputs"
	"github.com/midsag/midsag/internal/atomicfile"
	"github.com/midsag/midsag/models"
	"github.com/midsag/midsag/pipeline"
)

func init() {
	register("score", "score one study (files, folders or a zip) and print the result", runScore)
}

func runScore(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlags("score", "PATH...", "Reads one study from DICOM files, folders or a zip archive, picks the T2 sagittal\n"+
		"series and its midline slices, runs the model on the CPU and prints the result.", stderr)
	var pf pipelineFlags
	pf.register(fs, "add an occlusion map to the result; with --out also write heatmap.png and heatmap.dcm")
	asJSON := fs.Bool("json", false, "print the result (or the refusal) as JSON")
	out := fs.String("out", "", "also write result.json into this `folder`")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if fs.NArg() == 0 {
		fs.Usage()
		return usagef("score needs at least one PATH")
	}
	cfg, err := pf.config(models.Options{IntraOpThreads: pf.threads})
	if err != nil {
		return err
	}
	res, err := scoreStudy(ctx, cfg, fs.Args())
	if err != nil {
		return reportRejection(err, *asJSON, stderr)
	}
	if *out != "" {
		if err := writeJSONFile(filepath.Join(*out, "result.json"), res); err != nil {
			return err
		}
		if res.Explanation != nil {
			if err := writeHeatmaps(*out, res); err != nil {
				return err
			}
		}
	}
	if *asJSON {
		return printJSON(stdout, res)
	}
	printSummary(stdout, res)
	return nil
}

// writeHeatmaps writes the explanation as heatmap.png and as the DICOM
// Secondary Capture heatmap.dcm into dir.
func writeHeatmaps(dir string, res *midsag.Result) error {
	png, err := explain.Heatmap(res)
	if err != nil {
		return err
	}
	if err := writeFileAtomic(filepath.Join(dir, "heatmap.png"), png); err != nil {
		return err
	}
	dcm, err := explain.SecondaryCapture(res, explain.SCOptions{})
	if err != nil {
		return err
	}
	return writeFileAtomic(filepath.Join(dir, "heatmap.dcm"), dcm)
}

// scoreStudy builds the one Pipeline from cfg and runs it on the given
// paths as one study.
func scoreStudy(ctx context.Context, cfg pipeline.Config, paths []string) (*midsag.Result, error) {
	sources, closeSources, err := inputs.Collect(paths, inputs.DefaultLimits)
	if err != nil {
		return nil, err
	}
	defer closeSources()
	p, model, err := pipeline.New(cfg)
	if err != nil {
		return nil, err
	}
	defer model.Close()
	return p.Run(ctx, sources)
}

// reportRejection prints an input refusal (as JSON when asked, with the
// series candidates when there are any) and returns an error whose exit
// code is 3. Other errors are returned unchanged.
func reportRejection(err error, asJSON bool, stderr io.Writer) error {
	e := midsag.RefusalOf(err)
	if e == nil {
		return err
	}
	msg := e.Message()
	if asJSON {
		if perr := printJSON(stderr, midsag.NewRefusalBody(e, msg)); perr != nil {
			return perr
		}
		return &reportedError{err: err, code: exitRejected}
	}
	if src := e.Details["source"]; src != "" {
		msg = src + ": " + msg
	}
	fmt.Fprintf(stderr, "midsag: rejected (%s): %s\n", e.Reason, msg)
	for _, c := range e.Candidates {
		fmt.Fprintf(stderr, "  series #%d %q, %d instances, score %.2f\n", c.SeriesNumber, c.Description, c.Instances, c.Score)
		for _, r := range c.Reasons {
			fmt.Fprintf(stderr, "    - %s\n", r)
		}
	}
	fmt.Fprintf(stderr, "%s\n", midsag.Notice)
	return &reportedError{err: err, code: exitRejected}
}

func printJSON(w io.Writer, v any) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	enc.SetEscapeHTML(false)
	return enc.Encode(v)
}

// writeJSONFile writes v to path through a temporary file and a rename,
// so a reader never sees a partial file.
func writeJSONFile(path string, v any) error {
	if err := os.MkdirAll(filepath.Dir(path), 0o755); err != nil {
		return err
	}
	var b bytes.Buffer
	if err := printJSON(&b, v); err != nil {
		return err
	}
	return writeFileAtomic(path, b.Bytes())
}

// writeFileAtomic writes an output file atomically and durably
// (atomicfile); outputs are ordinary files other users may read.
func writeFileAtomic(path string, data []byte) error {
	return atomicfile.WriteFile(path, data, atomicfile.Perm(0o644))
}

// printSummary prints a short human-readable account of a result.
func printSummary(w io.Writer, r *midsag.Result) {
	fmt.Fprintf(w, "%s\n\n", r.Notice)
	fmt.Fprintf(w, "study        %s\n", r.StudyInstanceUID)
	for _, c := range r.SeriesCandidates {
		if c.Picked {
			fmt.Fprintf(w, "series       #%d %q, %d slices, score %.2f (best of %d series)\n",
				c.SeriesNumber, c.Description, c.Instances, c.Score, len(r.SeriesCandidates))
		}
	}
	var stack []string
	center := -1
	for i, s := range r.Slices {
		if s.InStack {
			stack = append(stack, fmt.Sprint(i+1))
		}
		if s.SOPInstanceUID == r.CenterSOPInstanceUID && s.FrameNumber == r.CenterFrameNumber {
			center = i
		}
	}
	where := "no centre slice listed"
	if center >= 0 {
		where = fmt.Sprintf("instance %d", r.Slices[center].InstanceNumber)
		if f := r.Slices[center].FrameNumber; f > 0 {
			where += fmt.Sprintf(", frame %d", f)
		}
	}
	fmt.Fprintf(w, "midline      slice %d of %d (%s), confidence %.2f; stack %s\n",
		center+1, len(r.Slices), where, r.MidlineConfidence, strings.Join(stack, ","))
	fmt.Fprintf(w, "model        %s %s (sha256 %.12s)\n", r.Model.Name, r.Model.Version, r.Model.SHA256)
	fmt.Fprintf(w, "probability  %.4g uncalibrated, %.4g calibrated (%s)\n", r.Probability, r.CalibratedProb, r.CalibrationMethod)
	fmt.Fprintf(w, "decision     %s (threshold %.2f)\n", r.Decision, r.Threshold)
	flags := "none"
	if len(r.QualityFlags) > 0 {
		flags = strings.Join(r.QualityFlags, ", ")
	}
	fmt.Fprintf(w, "quality      %s\n", flags)
	if e := r.Explanation; e != nil {
		p := e.PeakPatientMM
		fmt.Fprintf(w, "map          %s, %s baseline, %d model runs; peak at row %d, col %d of the centre slice (patient %.1f, %.1f, %.1f mm)\n",
			e.Method, e.Baseline, e.ModelRuns, e.Peak.Row, e.Peak.Col, p[0], p[1], p[2])
	}
	fmt.Fprintf(w, "time         %.0f ms\n", r.TimingsMS["total"])
}
