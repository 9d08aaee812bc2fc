package main

import (
	"bytes"
	"context"
	"encoding/csv"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"io/fs"
	"os"
	"sort"
	"strconv"
	"strings"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/evaluate"
	"github.com/midsag/midsag/models"
)

func init() {
	register("calibrate", "fit a calibrator on a validation table of raw outputs and labels", runCalibrate)
}

// calibrateReport is what calibrate prints with --json.
type calibrateReport struct {
	Table      string                 `json:"table"`
	Method     string                 `json:"method"`
	ScoreKind  string                 `json:"score_kind"`
	Rows       int                    `json:"rows"`
	Positives  int                    `json:"positives"`
	Prevalence float64                `json:"prevalence"`
	Calibrated string                 `json:"calibration_method"`
	Spec       models.CalibrationSpec `json:"calibration"`
	Before     evaluate.Diagnostics   `json:"before"`
	// After is measured with the fitted calibrator alone; a prior shift
	// aims at another population, so on the fitting table it only adds
	// error and is measured apart in AfterPriorShift.
	After           evaluate.Diagnostics  `json:"after"`
	AfterPriorShift *evaluate.Diagnostics `json:"after_prior_shift,omitempty"`
	ECEBinning      string                `json:"ece_binning"`
	Out             string                `json:"out,omitempty"`
	Sidecar         string                `json:"sidecar,omitempty"`
	Notice          string                `json:"notice"`
}

// calibrateFlags are the flags of midsag calibrate.
type calibrateFlags struct {
	table, scoreCol, labelCol, positive string
	method, scoreKind, out, modelPath   string
	prevalence                          float64
	write, asJSON                       bool
}

func (c *calibrateFlags) register(fs *flag.FlagSet) {
	fs.StringVar(&c.table, "table", "", "validation table `file` (CSV with a header row)")
	fs.StringVar(&c.scoreCol, "score-col", "", "`column` holding the model's raw output")
	fs.StringVar(&c.labelCol, "label-col", "", "`column` holding the label")
	fs.StringVar(&c.positive, "positive", "", "label `value` of the positive class; every other value is negative")
	fs.StringVar(&c.method, "method", "", "calibration `method`: temperature, platt or isotonic")
	fs.StringVar(&c.scoreKind, "score-kind", "", "what the score is, `logit or probability` (default probability; with --model the manifest's output.kind)")
	fs.Float64Var(&c.prevalence, "prevalence", 0, "positive `share` where the model will be used; adds a prior shift from the table's share (0 = none)")
	fs.StringVar(&c.out, "out", "", "write the table with an added calibrated column to this `file`")
	fs.StringVar(&c.modelPath, "model", "", "model `file` (.onnx): its manifest says whether the score is a logit")
	fs.BoolVar(&c.write, "write", false, "store the calibrator in the model's sidecar manifest (needs --model)")
	fs.BoolVar(&c.asJSON, "json", false, "print the parameters and diagnostics as JSON")
}

// check returns a usage error for a missing or contradictory flag.
func (c *calibrateFlags) check() error {
	if c.table == "" || c.scoreCol == "" || c.labelCol == "" || c.positive == "" {
		return usagef("calibrate needs --table, --score-col, --label-col and --positive")
	}
	switch c.method {
	case models.MethodTemperature, models.MethodPlatt, models.MethodIsotonic:
	default:
		return usagef("--method is %q, want temperature, platt or isotonic", c.method)
	}
	if c.prevalence != 0 && !(c.prevalence > 0 && c.prevalence < 1) {
		return usagef("--prevalence must be strictly between 0 and 1, got %v", c.prevalence)
	}
	if c.write && c.modelPath == "" {
		return usagef("--write needs --model")
	}
	if c.scoreKind != "" && c.scoreKind != models.KindLogit && c.scoreKind != models.KindProbability {
		return usagef("--score-kind is %q, want logit or probability", c.scoreKind)
	}
	return nil
}

// kind returns what the table's score is: --score-kind, or with --model
// the manifest's output kind (which --score-kind may not contradict), or
// a probability; and the manifest when there is a model.
func (c *calibrateFlags) kind() (string, *models.Manifest, error) {
	if c.modelPath == "" {
		if c.scoreKind == "" {
			return models.KindProbability, nil, nil
		}
		return c.scoreKind, nil, nil
	}
	man, err := modelManifest(c.modelPath)
	if err != nil {
		return "", nil, err
	}
	if c.scoreKind != "" && c.scoreKind != man.Output.Kind {
		return "", nil, usagef("--score-kind %s contradicts the manifest of %s, whose output.kind is %s", c.scoreKind, c.modelPath, man.Output.Kind)
	}
	return man.Output.Kind, man, nil
}

func runCalibrate(_ context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlags("calibrate", "", "Fits a calibrator (temperature, platt or isotonic) on a validation table of raw model\n"+
		"outputs and labels, prints its parameters with NLL, Brier score and ECE before and after,\n"+
		"and optionally writes the table with a calibrated column or stores the calibrator in the\n"+
		"model's sidecar manifest (the .onnx file is never rewritten).", stderr)
	var c calibrateFlags
	c.register(fs)
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if fs.NArg() != 0 {
		return usagef("calibrate takes no arguments, got %q", fs.Args())
	}
	if err := c.check(); err != nil {
		return err
	}
	kind, man, err := c.kind()
	if err != nil {
		return reportRejection(err, c.asJSON, stderr)
	}
	rep, err := c.fit(kind)
	if err != nil {
		return reportRejection(err, c.asJSON, stderr)
	}
	if c.write {
		path, err := writeSidecarCalibration(c.modelPath, man, rep.Spec)
		if err != nil {
			return err
		}
		rep.Sidecar = path
	}
	if c.asJSON {
		return printJSON(stdout, rep)
	}
	printCalibrateSummary(stdout, rep)
	return nil
}

// fit reads the table, fits the calibrator, measures it and writes the
// calibrated table with --out.
func (c *calibrateFlags) fit(kind string) (*calibrateReport, error) {
	raw, err := os.ReadFile(c.table)
	if err != nil {
		return nil, fmt.Errorf("read table: %w", err)
	}
	header, rows, ft, err := readCalibrationTable(raw, c.scoreCol, c.labelCol, c.positive, kind)
	if err != nil {
		return nil, err
	}
	spec, err := models.Fit(c.method, ft, c.prevalence)
	if err != nil {
		return nil, fmt.Errorf("fit %s on %s: %w", c.method, c.table, err)
	}
	cal, err := models.CalibratorFromManifest(spec)
	if err != nil {
		return nil, fmt.Errorf("fitted calibrator: %w", err)
	}
	rep, calibrated, err := diagnose(spec, cal, ft)
	if err != nil {
		return nil, err
	}
	rep.Table, rep.Method, rep.ScoreKind = c.table, c.method, kind
	if c.out != "" {
		if err := writeCalibratedTable(c.out, header, rows, calibrated); err != nil {
			return nil, err
		}
		rep.Out = c.out
	}
	return rep, nil
}

// diagnose measures the table's probabilities before and after the
// calibrator and returns the calibrated value of every row.
func diagnose(spec models.CalibrationSpec, cal models.Calibrator, ft *models.FitTable) (*calibrateReport, []float64, error) {
	p := ft.Probabilities()
	calibrated := make([]float64, len(p))
	for i, q := range p {
		calibrated[i] = cal.Calibrate(q)
	}
	rep := &calibrateReport{
		Rows:       len(p),
		Prevalence: ft.Prevalence(),
		Calibrated: cal.Method(),
		Spec:       spec,
		Before:     evaluate.Diagnose(p, ft.Positive),
		ECEBinning: fmt.Sprintf("%d equal-width bins on the positive-class probability, weighted by bin count", evaluate.ECEBins),
		Notice:     midsag.Notice,
	}
	for _, y := range ft.Positive {
		if y {
			rep.Positives++
		}
	}
	if spec.PriorShift == nil {
		rep.After = evaluate.Diagnose(calibrated, ft.Positive)
		return rep, calibrated, nil
	}
	unshifted := spec
	unshifted.PriorShift = nil
	base, err := models.CalibratorFromManifest(unshifted)
	if err != nil {
		return nil, nil, fmt.Errorf("fitted calibrator: %w", err)
	}
	before := make([]float64, len(p))
	for i, q := range p {
		before[i] = base.Calibrate(q)
	}
	rep.After = evaluate.Diagnose(before, ft.Positive)
	shifted := evaluate.Diagnose(calibrated, ft.Positive)
	rep.AfterPriorShift = &shifted
	return rep, calibrated, nil
}

// readCalibrationTable parses a CSV table with a header row and returns
// the header, the data rows and the scores and labels. Table problems
// carry midsag.ReasonBadTable.
func readCalibrationTable(data []byte, scoreCol, labelCol, positive, kind string) ([]string, [][]string, *models.FitTable, error) {
	r := csv.NewReader(bytes.NewReader(data))
	records, err := r.ReadAll()
	if err != nil {
		return nil, nil, nil, midsag.Reject(midsag.ReasonBadTable, "the table is not valid CSV", err)
	}
	if len(records) < 2 {
		return nil, nil, nil, midsag.Rejectf(midsag.ReasonBadTable, "the table needs a header row and at least one data row")
	}
	header := records[0]
	col := func(name string) (int, error) {
		for i, h := range header {
			if strings.TrimSpace(h) == name {
				return i, nil
			}
		}
		return -1, midsag.Rejectf(midsag.ReasonBadTable, "no column %q in the header %q", name, header)
	}
	si, err := col(scoreCol)
	if err != nil {
		return nil, nil, nil, err
	}
	li, err := col(labelCol)
	if err != nil {
		return nil, nil, nil, err
	}
	ft := &models.FitTable{Kind: kind}
	seen := map[string]bool{}
	for n, rec := range records[1:] {
		line := n + 2 // the header is line 1
		s := strings.TrimSpace(rec[si])
		v, err := strconv.ParseFloat(s, 64)
		if err != nil {
			return nil, nil, nil, midsag.Rejectf(midsag.ReasonBadTable, "line %d: score %q in column %q is not a number", line, s, scoreCol)
		}
		if kind == models.KindProbability && !(v > 0 && v < 1) {
			return nil, nil, nil, midsag.Rejectf(midsag.ReasonBadTable, "line %d: probability score %v is not strictly between 0 and 1 (is the score a logit? see --score-kind)", line, v)
		}
		label := strings.TrimSpace(rec[li])
		seen[label] = true
		ft.Scores = append(ft.Scores, v)
		ft.Positive = append(ft.Positive, label == positive)
	}
	if !seen[positive] {
		return nil, nil, nil, midsag.Rejectf(midsag.ReasonBadTable, "the positive label %q never occurs in column %q (values seen: %s)", positive, labelCol, sortedKeys(seen))
	}
	if len(seen) == 1 {
		return nil, nil, nil, midsag.Rejectf(midsag.ReasonBadTable, "every row of column %q is %q; calibration needs both classes", labelCol, positive)
	}
	if err := ft.Check(); err != nil {
		return nil, nil, nil, err
	}
	return header, records[1:], ft, nil
}

// sortedKeys lists a set's members in order, quoted, for messages.
func sortedKeys(set map[string]bool) string {
	keys := make([]string, 0, len(set))
	for k := range set {
		keys = append(keys, strconv.Quote(k))
	}
	sort.Strings(keys)
	return strings.Join(keys, ", ")
}

// writeCalibratedTable writes the table with a calibrated column added
// after the original ones, through a temporary file and a rename.
func writeCalibratedTable(path string, header []string, rows [][]string, calibrated []float64) error {
	for _, h := range header {
		if strings.TrimSpace(h) == "calibrated" {
			return midsag.Rejectf(midsag.ReasonBadTable, "the table already has a column \"calibrated\"; --out would hide it")
		}
	}
	var b bytes.Buffer
	w := csv.NewWriter(&b)
	if err := w.Write(append(append([]string(nil), header...), "calibrated")); err != nil {
		return fmt.Errorf("write %s: %w", path, err)
	}
	for i, rec := range rows {
		if err := w.Write(append(append([]string(nil), rec...), strconv.FormatFloat(calibrated[i], 'g', -1, 64))); err != nil {
			return fmt.Errorf("write %s: %w", path, err)
		}
	}
	w.Flush()
	if err := w.Error(); err != nil {
		return fmt.Errorf("write %s: %w", path, err)
	}
	return writeFileAtomic(path, b.Bytes())
}

// modelManifest returns the manifest in effect for a model file: its
// sidecar when there is one, else the one embedded in the ONNX metadata.
func modelManifest(path string) (*models.Manifest, error) {
	side, err := os.ReadFile(models.SidecarPath(path))
	switch {
	case err == nil:
		m, err := models.ParseManifest(side)
		if err != nil {
			return nil, fmt.Errorf("sidecar %s: %w", models.SidecarPath(path), err)
		}
		return m, nil
	case !errors.Is(err, fs.ErrNotExist):
		return nil, fmt.Errorf("read sidecar manifest: %w", err)
	}
	onnx, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("read model: %w", err)
	}
	m, err := models.ReadManifest(onnx)
	if err != nil {
		return nil, fmt.Errorf("model %s: %w", path, err)
	}
	return m, nil
}

// writeSidecarCalibration stores spec as the calibration of man and writes
// it as the model's sidecar manifest, atomically; the ONNX file is not
// touched. It returns the sidecar's path.
func writeSidecarCalibration(modelPath string, man *models.Manifest, spec models.CalibrationSpec) (string, error) {
	updated := *man
	updated.Calibration = spec
	if err := updated.Validate(); err != nil {
		return "", fmt.Errorf("manifest with the new calibration: %w", err)
	}
	data, err := json.MarshalIndent(&updated, "", "  ")
	if err != nil {
		return "", fmt.Errorf("encode manifest: %w", err)
	}
	path := models.SidecarPath(modelPath)
	if err := writeFileAtomic(path, append(data, '\n')); err != nil {
		return "", fmt.Errorf("write sidecar manifest: %w", err)
	}
	return path, nil
}

// printCalibrateSummary prints the fit for a person.
func printCalibrateSummary(w io.Writer, r *calibrateReport) {
	fmt.Fprintf(w, "%s\n\n", r.Notice)
	fmt.Fprintf(w, "table        %s: %d rows, %d positive (prevalence %.4g), scores are %ss\n", r.Table, r.Rows, r.Positives, r.Prevalence, r.ScoreKind)
	fmt.Fprintf(w, "calibrator   %s\n", r.Calibrated)
	s := r.Spec
	switch s.Method {
	case models.MethodTemperature:
		fmt.Fprintf(w, "parameters   T = %.6g\n", s.Temperature)
	case models.MethodPlatt:
		fmt.Fprintf(w, "parameters   A = %.6g, B = %.6g  (p = 1/(1+exp(A*f+B)), f = logit)\n", s.Platt.A, s.Platt.B)
	case models.MethodIsotonic:
		fmt.Fprintf(w, "parameters   %d breakpoints from p = %.4g to %.4g\n", len(s.Isotonic.X), s.Isotonic.X[0], s.Isotonic.X[len(s.Isotonic.X)-1])
	}
	if ps := s.PriorShift; ps != nil {
		fmt.Fprintf(w, "prior shift  prevalence %.4g -> %.4g\n", ps.TrainPrevalence, ps.TargetPrevalence)
	}
	fmt.Fprintf(w, "\n%-22s %10s %10s %10s\n", "", "NLL", "Brier", "ECE")
	row := func(name string, d evaluate.Diagnostics) {
		fmt.Fprintf(w, "%-22s %10.5f %10.5f %10.5f\n", name, d.NLL, d.Brier, d.ECE)
	}
	row("before", r.Before)
	row("after", r.After)
	if r.AfterPriorShift != nil {
		row("after prior shift", *r.AfterPriorShift)
	}
	fmt.Fprintf(w, "ECE: %s\n", r.ECEBinning)
	if r.Out != "" {
		fmt.Fprintf(w, "wrote        %s\n", r.Out)
	}
	if r.Sidecar != "" {
		fmt.Fprintf(w, "sidecar      %s\n", r.Sidecar)
	}
}
