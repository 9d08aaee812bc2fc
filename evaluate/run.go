package evaluate

import (
	"errors"
	"fmt"
	"math"

	"github.com/midsag/midsag"
)

// MinCases is the number of cases below which Run still answers but adds a
// warning: intervals from so few cases are too wide to say much (common
// practice).
const MinCases = 10

// Options chooses the operating point and the bootstrap.
type Options struct {
	Rule              Rule    // RuleYouden when empty
	Threshold         float64 // for RuleFixed
	TargetSensitivity float64 // for RuleTargetSensitivity
	Bootstrap         int     // stratified bootstrap replicates; 0 for none
	Seed              uint64  // bootstrap seed
	ScoreName         string  // column names, for the output
	CompareName       string
	ReaderName        string
	// Survival asks for a time-to-event evaluation of a table read with
	// time and event columns; nil for none.
	Survival *SurvivalOptions
}

// Summary is everything Run measures; it marshals to the JSON of
// "midsag evaluate --json".
type Summary struct {
	N              int                 `json:"n"`
	NPositive      int                 `json:"n_positive"`
	Prevalence     float64             `json:"prevalence"`
	PositiveLabel  string              `json:"positive_label"`
	NegativeLabel  string              `json:"negative_label"`
	Excluded       map[string]int      `json:"excluded"`
	Score          string              `json:"score_column"`
	AUC            AUCSummary          `json:"auc"`
	Compare        *CompareSummary     `json:"compare,omitempty"`
	OperatingPoint OperatingPoint      `json:"operating_point"`
	Reader         *ReaderSummary      `json:"reader,omitempty"`
	Calibration    *CalibrationSummary `json:"calibration,omitempty"`
	DecisionCurve  []NetBenefitPoint   `json:"decision_curve,omitempty"`
	ROC            []ROCPoint          `json:"roc"`
	ROCBand        ROCBand             `json:"roc_band"`
	Bootstrap      *BootstrapSummary   `json:"bootstrap,omitempty"`
	Survival       *SurvivalSummary    `json:"survival,omitempty"`
	Flow           []FlowStep          `json:"flow"`
	Subgroups      []Subgroup          `json:"subgroups,omitempty"`
	Provenance     *Provenance         `json:"provenance,omitempty"`
	Warnings       []string            `json:"warnings"`
	Notice         string              `json:"notice"`
}

// AUCSummary is the AUC with its DeLong interval.
type AUCSummary struct {
	Value  float64  `json:"value"`
	SE     float64  `json:"se"`
	CI95   Interval `json:"ci95"`
	Method string   `json:"method"`
}

// CompareSummary is the paired DeLong test of the score against a second
// score on the same cases. Z and PValue are absent when the test is
// undefined (see Warnings).
type CompareSummary struct {
	Column string     `json:"column"`
	AUC    AUCSummary `json:"auc"`
	Delta  float64    `json:"delta"`
	SE     *float64   `json:"se"`
	Z      *float64   `json:"z"`
	PValue *float64   `json:"p_value"`
	Method string     `json:"method"`
	// ROC is the compared score's empirical ROC curve.
	ROC []ROCPoint `json:"roc"`
}

// OperatingPoint is the model's performance at one threshold; a case is
// called positive when its score is at least Threshold.
type OperatingPoint struct {
	Threshold float64 `json:"threshold"`
	Rule      Rule    `json:"rule"`
	Performance
	CIMethod string `json:"ci_method"`
}

// Performance is binary calls scored against labels: the rates with
// their intervals and the confusion matrix they come from.
type Performance struct {
	Sensitivity Proportion `json:"sensitivity"`
	Specificity Proportion `json:"specificity"`
	PPV         Proportion `json:"ppv"`
	NPV         Proportion `json:"npv"`
	Accuracy    Proportion `json:"accuracy"`
	Confusion   Confusion  `json:"confusion"`
}

// ReaderSummary is a human reader's binary calls on the same cases and
// McNemar's exact test of reader against model correctness.
type ReaderSummary struct {
	Column string `json:"column"`
	Performance
	// ModelOnly counts cases the model got right and the reader wrong;
	// ReaderOnly the reverse. McNemar's test uses only these.
	ModelOnly  int     `json:"model_right_reader_wrong"`
	ReaderOnly int     `json:"model_wrong_reader_right"`
	PValue     float64 `json:"p_value"`
	Method     string  `json:"method"`
}

// CalibrationSummary holds calibration diagnostics of a score read as a
// probability. Slope is absent when it is undefined (see Warnings).
type CalibrationSummary struct {
	Brier     float64  `json:"brier"`
	ECE       float64  `json:"ece"`
	ECEMethod string   `json:"ece_method"`
	Intercept *float64 `json:"intercept"`
	Slope     *float64 `json:"slope"`
	Method    string   `json:"method"`
	Bins      []Bin    `json:"bins"`
}

// ROCBand is a pointwise 95% band around the ROC curve: at each FPR, the
// interval of the TPR. It is not a simultaneous band.
type ROCBand struct {
	Method string    `json:"method"`
	FPR    []float64 `json:"fpr"`
	Lo     []float64 `json:"tpr_lo"`
	Hi     []float64 `json:"tpr_hi"`
}

// BootstrapSummary holds stratified bootstrap percentile intervals.
type BootstrapSummary struct {
	Replicates  int      `json:"replicates"`
	Seed        uint64   `json:"seed"`
	Method      string   `json:"method"`
	AUC         Interval `json:"auc_ci95"`
	Sensitivity Interval `json:"sensitivity_ci95"`
	Specificity Interval `json:"specificity_ci95"`
}

// Run evaluates the table's score (and its compare column and reader calls
// when present) against its labels. It fails with midsag.ReasonBadTable
// when the cases hold one class only.
func Run(t *Table, positive string, o Options) (*Summary, error) {
	s := &Summary{
		N: len(t.Labels), PositiveLabel: positive, NegativeLabel: t.NegativeLabel,
		Excluded: t.Excluded, Score: o.ScoreName, Warnings: []string{}, Notice: midsag.Notice,
	}
	for _, l := range t.Labels {
		if l {
			s.NPositive++
		}
	}
	if s.NPositive == 0 || s.NPositive == s.N {
		return nil, midsag.Reject(midsag.ReasonBadTable, fmt.Sprintf("%d cases, %d positive", s.N, s.NPositive), ErrOneClass)
	}
	s.Prevalence = float64(s.NPositive) / float64(s.N)
	if s.N < MinCases {
		s.Warnings = append(s.Warnings, fmt.Sprintf("only %d cases: intervals are very wide", s.N))
	}
	if constant(t.Scores) {
		s.Warnings = append(s.Warnings, "the score is constant: AUC 0.5 with a zero-width DeLong interval")
	}
	a, err := DeLong(t.Scores, t.Labels)
	if err != nil {
		return nil, err
	}
	s.AUC = aucSummary(a)
	if t.Compare != nil {
		if s.Compare, err = compareSummary(t, o.CompareName, s); err != nil {
			return nil, err
		}
	}
	if s.ROC, err = ROC(t.Scores, t.Labels); err != nil {
		return nil, err
	}
	if s.OperatingPoint, err = operatingPoint(t, s.ROC, o); err != nil {
		return nil, err
	}
	if t.Reader != nil {
		if s.Reader, err = readerSummary(t, o.ReaderName, s.OperatingPoint.Threshold); err != nil {
			return nil, err
		}
	}
	if probabilities(t.Scores) {
		s.Calibration = calibrationSummary(t, s)
		s.DecisionCurve = NetBenefit(t.Scores, t.Labels)
	} else {
		s.Warnings = append(s.Warnings, "scores outside [0, 1]: no calibration diagnostics or decision curve")
	}
	s.ROCBand = wilsonBand(s.ROC, s.NPositive)
	if o.Bootstrap > 0 {
		b, band := Bootstrap(t.Scores, t.Labels, s.OperatingPoint.Threshold, o.Bootstrap, o.Seed)
		s.Bootstrap = &b
		s.ROCBand = band
	}
	return s, nil
}

// Evaluate runs what the table allows: with a positive label the binary
// evaluation of Run, with o.Survival the time-to-event evaluation of
// RunSurvival, or both; then the flow of studies and the subgroups. The
// Kaplan–Meier risk groups default to the model's decision when a
// threshold is known (the operating point, or a fixed threshold) and to
// tertiles of the score otherwise.
func Evaluate(t *Table, positive string, o Options) (*Summary, error) {
	s, err := evaluate(t, positive, o)
	if err != nil {
		return nil, err
	}
	s.Flow = flowSteps(t, s)
	s.Subgroups = subgroups(t, s)
	s.Provenance = &Provenance{Models: modelsOf(t.Models)}
	if len(t.Models) > 1 {
		s.Warnings = append(s.Warnings, fmt.Sprintf("the table's scores come from %d different models (model_sha256)", len(t.Models)))
	}
	return s, nil
}

func evaluate(t *Table, positive string, o Options) (*Summary, error) {
	var s *Summary
	threshold, haveThreshold := o.Threshold, o.Rule == RuleFixed
	if positive != "" {
		var err error
		if s, err = Run(t, positive, o); err != nil {
			return nil, err
		}
		threshold, haveThreshold = s.OperatingPoint.Threshold, true
	} else {
		s = &Summary{N: len(t.Scores), Excluded: t.Excluded, Score: o.ScoreName, Warnings: []string{}, Notice: midsag.Notice}
	}
	if o.Survival == nil {
		return s, nil
	}
	so := *o.Survival
	if so.Groups == "" {
		so.Groups = GroupsTertiles
		if haveThreshold {
			so.Groups = GroupsDecision
		}
	}
	if so.Groups == GroupsDecision {
		if !haveThreshold {
			return nil, errors.New("evaluate: decision risk groups need a threshold (a label column or --threshold)")
		}
		so.Threshold = threshold
	}
	sv, err := RunSurvival(t, so, o.ScoreName, o.Bootstrap, o.Seed)
	if err != nil {
		return nil, err
	}
	s.Survival = sv
	s.Warnings = append(s.Warnings, sv.Warnings...)
	return s, nil
}

func aucSummary(a AUCResult) AUCSummary {
	return AUCSummary{Value: a.Value, SE: a.SE, CI95: a.CI95,
		Method: "DeLong (DeLong, DeLong and Clarke-Pearson 1988; Sun and Xu 2014), AUC ± 1.96·SE clipped to [0, 1]"}
}

func compareSummary(t *Table, name string, s *Summary) (*CompareSummary, error) {
	b, err := DeLong(t.Compare, t.Labels)
	if err != nil {
		return nil, err
	}
	cs := &CompareSummary{Column: name, AUC: aucSummary(b), Delta: s.AUC.Value - b.Value,
		Method: "paired DeLong test, two-sided (DeLong, DeLong and Clarke-Pearson 1988)"}
	if cs.ROC, err = ROC(t.Compare, t.Labels); err != nil {
		return nil, err
	}
	c, err := Compare(t.Scores, t.Compare, t.Labels)
	if err != nil {
		s.Warnings = append(s.Warnings, err.Error())
		return cs, nil
	}
	cs.SE, cs.Z, cs.PValue = &c.SE, &c.Z, &c.P
	return cs, nil
}

func operatingPoint(t *Table, roc []ROCPoint, o Options) (OperatingPoint, error) {
	rule := o.Rule
	if rule == "" {
		rule = RuleYouden
	}
	th := o.Threshold
	if rule != RuleFixed {
		var err error
		if th, err = PickThreshold(roc, rule, o.TargetSensitivity); err != nil {
			return OperatingPoint{}, err
		}
	}
	c := Classify(t.Scores, t.Labels, th)
	return OperatingPoint{Threshold: th, Rule: rule, Performance: performance(c),
		CIMethod: "Wilson score interval (Wilson 1927)"}, nil
}

// performance computes the rates of a confusion matrix with Wilson
// intervals.
func performance(c Confusion) Performance {
	return Performance{
		Sensitivity: Wilson(c.TP, c.TP+c.FN), Specificity: Wilson(c.TN, c.TN+c.FP),
		PPV: Wilson(c.TP, c.TP+c.FP), NPV: Wilson(c.TN, c.TN+c.FN),
		Accuracy: Wilson(c.TP+c.TN, c.TP+c.TN+c.FP+c.FN), Confusion: c,
	}
}

func readerSummary(t *Table, name string, threshold float64) (*ReaderSummary, error) {
	c := Tally(t.Reader, t.Labels)
	r := &ReaderSummary{Column: name, Performance: performance(c),
		Method: "McNemar's exact test on paired correctness at the model's operating point (McNemar 1947)"}
	for i, l := range t.Labels {
		model := (t.Scores[i] >= threshold) == l
		reader := t.Reader[i] == l
		switch {
		case model && !reader:
			r.ModelOnly++
		case reader && !model:
			r.ReaderOnly++
		}
	}
	p, err := McNemar(r.ModelOnly, r.ReaderOnly)
	if err != nil {
		return nil, err
	}
	r.PValue = p
	return r, nil
}

func calibrationSummary(t *Table, s *Summary) *CalibrationSummary {
	c := &CalibrationSummary{
		Brier:     Brier(t.Scores, t.Labels),
		ECE:       ECE(t.Scores, t.Labels),
		ECEMethod: fmt.Sprintf("%d equal-width bins on [0, 1], weighted by count", ECEBins),
		Method: "logistic recalibration (Cox 1958) on logit(p), p clipped to [1e-8, 1-1e-8]: " +
			"slope from the 2-parameter fit, intercept from the fit with slope fixed at 1; Newton's method",
		Bins: Reliability(t.Scores, t.Labels),
	}
	a, b, err := CalibrationFit(t.Scores, t.Labels)
	if !math.IsNaN(a) {
		c.Intercept = &a
	}
	if !math.IsNaN(b) {
		c.Slope = &b
	}
	if err != nil {
		if errors.Is(err, ErrSeparated) {
			s.Warnings = append(s.Warnings, err.Error())
		} else {
			s.Warnings = append(s.Warnings, "calibration fit: "+err.Error())
		}
	}
	return c
}

// wilsonBand is the pointwise band drawn without a bootstrap: at each ROC
// point, the Wilson 95% interval of its TPR (true positives of the
// positives at that threshold).
func wilsonBand(roc []ROCPoint, npos int) ROCBand {
	b := ROCBand{Method: "pointwise Wilson 95% interval of the TPR at each ROC point (not simultaneous)"}
	for _, p := range roc {
		w := Wilson(int(math.Round(p.TPR*float64(npos))), npos)
		b.FPR = append(b.FPR, p.FPR)
		b.Lo = append(b.Lo, w.CI95[0])
		b.Hi = append(b.Hi, w.CI95[1])
	}
	return b
}

func constant(x []float64) bool {
	for _, v := range x {
		if v != x[0] {
			return false
		}
	}
	return true
}

func probabilities(x []float64) bool {
	for _, v := range x {
		if v < 0 || v > 1 {
			return false
		}
	}
	return true
}
