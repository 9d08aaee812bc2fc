package main

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"flag"
	"fmt"
	"hash"
	"io"
	"math"
	"os"
	"strconv"
	"strings"
	"time"

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
	sf := survivalFlags(fs)
	var subgroups []string
	fs.Func("subgroup", "report the figures within each value of this `column` too (repeat for several)", func(c string) error {
		subgroups = append(subgroups, c)
		return nil
	})
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if fs.NArg() != 0 {
		return usagef("evaluate takes no arguments")
	}
	for _, req := range []struct{ name, v string }{{"table", *table}, {"score-col", *scoreCol}} {
		if req.v == "" {
			return usagef("evaluate: --%s is required", req.name)
		}
	}
	if (*labelCol == "") != (*positive == "") {
		return usagef("evaluate: --label-col and --positive go together")
	}
	if *labelCol == "" && sf.time == "" {
		return usagef("evaluate: give --label-col with --positive, or --time-col with --event-col, or both")
	}
	survOpts, err := sf.options()
	if err != nil {
		return err
	}
	if (*labelsFile == "") != (*idCol == "") {
		return usagef("evaluate: --labels and --id-col go together")
	}
	if *boot < 0 {
		return usagef("evaluate: --bootstrap must not be negative")
	}
	opts := evaluate.Options{Bootstrap: *boot, Seed: *seed, ScoreName: *scoreCol, CompareName: *compareCol, ReaderName: *readerCol,
		Survival: survOpts}
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
		Compare: *compareCol, Reader: *readerCol, ID: *idCol, Time: sf.time, Event: sf.event, Subgroups: subgroups}
	s, err := evaluateFiles(*table, *labelsFile, cols, opts)
	if err != nil {
		return reportRejection(err, *asJSON, stderr)
	}
	s.Provenance.Version = evaluate.Version(midsag.ImplementationVersionName)
	s.Provenance.Command = append([]string{"midsag", "evaluate"}, args...)
	s.Provenance.Date = time.Now().UTC().Format(time.RFC3339)
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

// evaluateFiles opens the table (and labels), runs the evaluation and
// records the files read, with the sha256 of the bytes read, in the
// summary's provenance.
func evaluateFiles(tablePath, labelsPath string, cols evaluate.Columns, opts evaluate.Options) (*evaluate.Summary, error) {
	table, err := openHashed("table", tablePath)
	if err != nil {
		return nil, err
	}
	defer table.Close()
	var lr io.Reader
	var labels *hashedFile
	if labelsPath != "" {
		if labels, err = openHashed("labels", labelsPath); err != nil {
			return nil, err
		}
		defer labels.Close()
		lr = labels
	}
	t, err := evaluate.ReadTable(table, tablePath, lr, labelsPath, cols)
	if err != nil {
		return nil, err
	}
	s, err := evaluate.Evaluate(t, cols.Positive, opts)
	if err != nil {
		return nil, err
	}
	s.Provenance.Inputs = append(s.Provenance.Inputs, table.input())
	if labels != nil {
		s.Provenance.Inputs = append(s.Provenance.Inputs, labels.input())
	}
	return s, nil
}

// hashedFile is an open input whose bytes are hashed as they are read.
type hashedFile struct {
	*os.File
	role, path string
	h          hash.Hash
	n          int64
}

func openHashed(role, path string) (*hashedFile, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, midsag.Reject(midsag.ReasonNoInput, "open "+role, err)
	}
	return &hashedFile{File: f, role: role, path: path, h: sha256.New()}, nil
}

// Read reads from the file and hashes what it read.
func (f *hashedFile) Read(p []byte) (int, error) {
	n, err := f.File.Read(p)
	f.h.Write(p[:n])
	f.n += int64(n)
	return n, err
}

func (f *hashedFile) input() evaluate.InputFile {
	return evaluate.InputFile{Role: f.role, Path: f.path, SHA256: hex.EncodeToString(f.h.Sum(nil)), Bytes: f.n}
}

// survivalFlagValues are the time-to-event options as given.
type survivalFlagValues struct {
	time, event, unit, groups string
	horizons                  []float64
	tau                       float64
}

// survivalFlags declares the time-to-event flags on fs.
func survivalFlags(fs *flag.FlagSet) *survivalFlagValues {
	v := &survivalFlagValues{}
	fs.StringVar(&v.time, "time-col", "", "follow-up time `column` (≥ 0): a time-to-event evaluation (with --event-col)")
	fs.StringVar(&v.event, "event-col", "", "event `column`: 1 when the event was seen at the time, 0 when censored there")
	fs.Func("horizon", "time-dependent AUC and Kaplan–Meier read-out at this `time` (repeat for several; default: the median time)", func(s string) error {
		h, err := strconv.ParseFloat(s, 64)
		if err != nil || !(h > 0) || math.IsInf(h, 0) {
			return fmt.Errorf("horizon %q is not a time > 0", s)
		}
		v.horizons = append(v.horizons, h)
		return nil
	})
	fs.Float64Var(&v.tau, "tau", 0, "truncation `time` of Uno's C (default: the last horizon)")
	fs.StringVar(&v.unit, "time-unit", "", "unit of the time column, for the output (e.g. `months`)")
	fs.StringVar(&v.groups, "risk-groups", "", "Kaplan–Meier groups: `decision` (the model's call) or tertiles (default: decision when a threshold is known)")
	return v
}

// options returns the survival options, nil without a time column.
func (v *survivalFlagValues) options() (*evaluate.SurvivalOptions, error) {
	if (v.time == "") != (v.event == "") {
		return nil, usagef("evaluate: --time-col and --event-col go together")
	}
	if v.time == "" {
		if len(v.horizons) > 0 || v.tau != 0 || v.unit != "" || v.groups != "" {
			return nil, usagef("evaluate: --horizon, --tau, --time-unit and --risk-groups need --time-col")
		}
		return nil, nil
	}
	switch v.groups {
	case "", evaluate.GroupsDecision, evaluate.GroupsTertiles:
	default:
		return nil, usagef("evaluate: --risk-groups %q is not decision or tertiles", v.groups)
	}
	if v.tau < 0 {
		return nil, usagef("evaluate: --tau must not be negative")
	}
	return &evaluate.SurvivalOptions{TimeUnit: v.unit, Horizons: v.horizons, Tau: v.tau, Groups: v.groups}, nil
}

// printEvaluation prints a short readable account of a summary.
func printEvaluation(w io.Writer, s *evaluate.Summary, reportDir string) {
	ci := func(c evaluate.Interval) string { return fmt.Sprintf("[%.3f, %.3f]", c[0], c[1]) }
	prop := func(p evaluate.Proportion) string {
		return fmt.Sprintf("%.3f %s (%d/%d)", p.Value, ci(p.CI95), p.K, p.N)
	}
	fmt.Fprintf(w, "%s\n\n", s.Notice)
	fmt.Fprintf(w, "cases        %d", s.N)
	if s.ROC != nil {
		fmt.Fprintf(w, ", %d positive (prevalence %.3f)", s.NPositive, s.Prevalence)
	}
	if ex := excludedText(s.Excluded); ex != "" {
		fmt.Fprintf(w, "; excluded %s", ex)
	}
	fmt.Fprintln(w)
	if s.ROC != nil {
		printBinary(w, s, ci, prop)
	}
	if s.Survival != nil {
		printSurvival(w, s.Survival, ci)
	}
	for _, warn := range s.Warnings {
		fmt.Fprintf(w, "warning      %s\n", warn)
	}
	if reportDir != "" {
		fmt.Fprintf(w, "report       %s/report.html\n", strings.TrimRight(reportDir, "/"))
	}
}

// printBinary prints the evaluation against binary labels.
func printBinary(w io.Writer, s *evaluate.Summary, ci func(evaluate.Interval) string, prop func(evaluate.Proportion) string) {
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
}

// printSurvival prints the time-to-event evaluation.
func printSurvival(w io.Writer, sv *evaluate.SurvivalSummary, ci func(evaluate.Interval) string) {
	u := sv.TimeUnit
	fmt.Fprintf(w, "follow-up    %d events, %d censored; median follow-up %s (reverse Kaplan–Meier)\n", sv.Events, sv.Censored, evaluate.FollowUpText(sv))
	fmt.Fprintf(w, "Harrell's C  %.3f", sv.Harrell.C)
	if b := sv.Bootstrap; b != nil {
		fmt.Fprintf(w, " %s", ci(b.Harrell))
	}
	fmt.Fprintf(w, "\nUno's C      %.3f", sv.Uno.C)
	if b := sv.Bootstrap; b != nil {
		fmt.Fprintf(w, " %s", ci(b.Uno))
	}
	fmt.Fprintf(w, " (truncated at %.4g %s, IPCW)\n", sv.Uno.Truncation, u)
	for _, a := range sv.TimeAUC {
		fmt.Fprintf(w, "%-12s %.3f", fmt.Sprintf("AUC(%.4g)", a.Horizon), a.AUC)
		if a.CI95 != nil {
			fmt.Fprintf(w, " %s", ci(*a.CI95))
		}
		fmt.Fprintf(w, "; %d cases, %d controls, %d censored before (IPCW-weighted, not counted negative)\n", a.Cases, a.Controls, a.CensoredBefore)
	}
	fmt.Fprintf(w, "risk groups  %s\n", sv.Groups)
	for _, c := range sv.Curves {
		fmt.Fprintf(w, "  %-26s n %d, %d events", c.Name, c.N, c.Events)
		for _, h := range c.AtH {
			fmt.Fprintf(w, "; S(%.4g) %.3f", h.Horizon, h.Surv)
			if h.CI95 != nil {
				fmt.Fprintf(w, " %s", ci(*h.CI95))
			}
		}
		fmt.Fprintln(w)
	}
	if lr := sv.LogRank; lr != nil {
		fmt.Fprintf(w, "log-rank     chi-square %.3f on %d df, p %.4g\n", lr.ChiSq, lr.DF, lr.PValue)
	}
}

func excludedText(ex map[string]int) string {
	var parts []string
	for _, k := range []string{"empty_score", "empty_compare", "empty_reader", "empty_label", "empty_time", "empty_event", "no_label"} {
		if ex[k] > 0 {
			parts = append(parts, fmt.Sprintf("%d %s", ex[k], k))
		}
	}
	return strings.Join(parts, ", ")
}
