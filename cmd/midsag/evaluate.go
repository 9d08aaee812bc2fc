package main

import (
	"context"
	"fmt"
	"io"
	"os"
	"strconv"
	"strings"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/evaluate"
)

func init() {
	register("evaluate", "measure a score (and a reader) against labels: AUC, operating point, calibration, report", runEvaluate)
}

func runEvaluate(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlags("evaluate", "", "Reads a CSV table of scores with labels (or joins it with a labels CSV on an id\n"+
		"column) and reports the AUC with its DeLong 95% interval, an operating point\n"+
		"with Wilson intervals, calibration, a decision curve and, optionally, a paired\n"+
		"DeLong test against a second score and a reader comparison. Rows with an empty\n"+
		"cell in a used column are excluded and counted; a malformed cell is refused\n"+
		"(exit 3, reason bad_table) naming its line. Research use only.", stderr)
	table := fs.String("table", "", "CSV `file` with a header row (required)")
	scoreCol := fs.String("score-col", "", "score `column`; higher means positive (required)")
	labelCol := fs.String("label-col", "", "label `column`, in --labels when given, else in --table (required)")
	positive := fs.String("positive", "", "label `value` of a positive case (required); exactly one other value is allowed")
	compareCol := fs.String("compare-col", "", "second score `column` for the paired DeLong test")
	readerCol := fs.String("reader-col", "", "reader's binary calls `column` (0 or 1)")
	labelsFile := fs.String("labels", "", "labels CSV `file` joined with --table on --id-col")
	idCol := fs.String("id-col", "", "id `column` present in both --table and --labels")
	threshold := fs.String("threshold", "", "call positive when score >= this `value` (default: Youden's J on these data)")
	targetSens := fs.String("target-sensitivity", "", "pick the highest threshold reaching this `sensitivity` (0..1]")
	boot := fs.Int("bootstrap", 0, "stratified bootstrap `replicates` for percentile intervals and the ROC band (0 = none)")
	seed := fs.Uint64("seed", 1, "bootstrap seed")
	report := fs.String("report", "", "write report.md, report.html and the plots into this `folder`")
	asJSON := fs.Bool("json", false, "print the summary as JSON")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if fs.NArg() != 0 {
		return usagef("evaluate takes no arguments")
	}
	for _, req := range []struct{ name, v string }{{"table", *table}, {"score-col", *scoreCol}, {"label-col", *labelCol}, {"positive", *positive}} {
		if req.v == "" {
			return usagef("evaluate: --%s is required", req.name)
		}
	}
	if (*labelsFile == "") != (*idCol == "") {
		return usagef("evaluate: --labels and --id-col go together")
	}
	if *boot < 0 {
		return usagef("evaluate: --bootstrap must not be negative")
	}
	opts := evaluate.Options{Bootstrap: *boot, Seed: *seed, ScoreName: *scoreCol, CompareName: *compareCol, ReaderName: *readerCol}
	switch {
	case *threshold != "" && *targetSens != "":
		return usagef("evaluate: give --threshold or --target-sensitivity, not both")
	case *threshold != "":
		v, err := strconv.ParseFloat(*threshold, 64)
		if err != nil {
			return usagef("evaluate: --threshold %q is not a number", *threshold)
		}
		opts.Rule, opts.Threshold = evaluate.RuleFixed, v
	case *targetSens != "":
		v, err := strconv.ParseFloat(*targetSens, 64)
		if err != nil || !(v > 0 && v <= 1) {
			return usagef("evaluate: --target-sensitivity %q is not in (0, 1]", *targetSens)
		}
		opts.Rule, opts.TargetSensitivity = evaluate.RuleTargetSensitivity, v
	}
	cols := evaluate.Columns{Score: *scoreCol, Label: *labelCol, Positive: *positive,
		Compare: *compareCol, Reader: *readerCol, ID: *idCol}
	s, err := evaluateFiles(*table, *labelsFile, cols, opts)
	if err != nil {
		return reportRejection(err, *asJSON, stderr)
	}
	if *report != "" {
		if err := evaluate.WriteReport(*report, s, writeFileAtomic); err != nil {
			return fmt.Errorf("evaluate: report: %w", err)
		}
	}
	if *asJSON {
		return printJSON(stdout, s)
	}
	printEvaluation(stdout, s, *report)
	return nil
}

// evaluateFiles opens the table (and labels) and runs the evaluation.
func evaluateFiles(tablePath, labelsPath string, cols evaluate.Columns, opts evaluate.Options) (*evaluate.Summary, error) {
	tf, err := os.Open(tablePath)
	if err != nil {
		return nil, midsag.Reject(midsag.ReasonNoInput, "open table", err)
	}
	defer tf.Close()
	var lr io.Reader
	if labelsPath != "" {
		lf, err := os.Open(labelsPath)
		if err != nil {
			return nil, midsag.Reject(midsag.ReasonNoInput, "open labels", err)
		}
		defer lf.Close()
		lr = lf
	}
	t, err := evaluate.ReadTable(tf, tablePath, lr, labelsPath, cols)
	if err != nil {
		return nil, err
	}
	return evaluate.Run(t, cols.Positive, opts)
}

// printEvaluation prints a short readable account of a summary.
func printEvaluation(w io.Writer, s *evaluate.Summary, reportDir string) {
	ci := func(c evaluate.Interval) string { return fmt.Sprintf("[%.3f, %.3f]", c[0], c[1]) }
	prop := func(p evaluate.Proportion) string {
		return fmt.Sprintf("%.3f %s (%d/%d)", p.Value, ci(p.CI95), p.K, p.N)
	}
	fmt.Fprintf(w, "%s\n\n", s.Notice)
	fmt.Fprintf(w, "cases        %d, %d positive (prevalence %.3f)", s.N, s.NPositive, s.Prevalence)
	if ex := excludedText(s.Excluded); ex != "" {
		fmt.Fprintf(w, "; excluded %s", ex)
	}
	fmt.Fprintln(w)
	fmt.Fprintf(w, "AUC          %.3f, 95%% CI %s (DeLong)\n", s.AUC.Value, ci(s.AUC.CI95))
	if c := s.Compare; c != nil {
		fmt.Fprintf(w, "compare      %s AUC %.3f %s; difference %+.3f", c.Column, c.AUC.Value, ci(c.AUC.CI95), c.Delta)
		if c.PValue != nil {
			fmt.Fprintf(w, ", z %.2f, p %.4g (paired DeLong)", *c.Z, *c.PValue)
		}
		fmt.Fprintln(w)
	}
	op := s.OperatingPoint
	fmt.Fprintf(w, "threshold    %.4g (%s)\n", op.Threshold, op.Rule)
	fmt.Fprintf(w, "  sensitivity %s\n  specificity %s\n  PPV         %s\n  NPV         %s\n  accuracy    %s\n",
		prop(op.Sensitivity), prop(op.Specificity), prop(op.PPV), prop(op.NPV), prop(op.Accuracy))
	fmt.Fprintf(w, "  confusion   TP %d  FP %d  TN %d  FN %d\n", op.Confusion.TP, op.Confusion.FP, op.Confusion.TN, op.Confusion.FN)
	if r := s.Reader; r != nil {
		fmt.Fprintf(w, "reader       %s\n  sensitivity %s\n  specificity %s\n", r.Column, prop(r.Sensitivity), prop(r.Specificity))
		fmt.Fprintf(w, "  vs model    model right/reader wrong %d, model wrong/reader right %d, McNemar exact p %.4g\n",
			r.ModelOnly, r.ReaderOnly, r.PValue)
	}
	if c := s.Calibration; c != nil {
		fmt.Fprintf(w, "calibration  Brier %.4f, ECE %.4f", c.Brier, c.ECE)
		if c.Intercept != nil {
			fmt.Fprintf(w, ", intercept %.3f", *c.Intercept)
		}
		if c.Slope != nil {
			fmt.Fprintf(w, ", slope %.3f", *c.Slope)
		}
		fmt.Fprintln(w)
	}
	if b := s.Bootstrap; b != nil {
		fmt.Fprintf(w, "bootstrap    %d replicates (seed %d): AUC %s, sensitivity %s, specificity %s\n",
			b.Replicates, b.Seed, ci(b.AUC), ci(b.Sensitivity), ci(b.Specificity))
	}
	for _, warn := range s.Warnings {
		fmt.Fprintf(w, "warning      %s\n", warn)
	}
	if reportDir != "" {
		fmt.Fprintf(w, "report       %s/report.html\n", strings.TrimRight(reportDir, "/"))
	}
}

func excludedText(ex map[string]int) string {
	var parts []string
	for _, k := range []string{"empty_score", "empty_compare", "empty_reader", "empty_label", "no_label"} {
		if ex[k] > 0 {
			parts = append(parts, fmt.Sprintf("%d %s", ex[k], k))
		}
	}
	return strings.Join(parts, ", ")
}
