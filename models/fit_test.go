package models

import (
	"encoding/json"
	"math"
	"os"
	"strconv"
	"testing"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/internal/testtool"
)

// calibRef is testdata/calib/reference.json, written once by
// testdata/calib/make_reference.py with scikit-learn 1.2.1, SciPy 1.10.1
// and NumPy 1.24.2 (the versions are in the file).
type calibRef struct {
	Versions map[string]string `json:"versions"`
	Rows     int               `json:"rows"`
	Isotonic struct {
		XThresholds []float64 `json:"x_thresholds"`
		YThresholds []float64 `json:"y_thresholds"`
		Grid        []float64 `json:"grid"`
		Predict     []float64 `json:"predict"`
	} `json:"isotonic"`
	PlattLogit  plattRef `json:"platt_logit"`
	PlattProb   plattRef `json:"platt_prob"`
	Temperature struct {
		T float64 `json:"T"`
	} `json:"temperature"`
}

type plattRef struct {
	Scipy   struct{ A, B float64 } `json:"scipy_trust_exact"`
	Sklearn struct{ A, B float64 } `json:"sklearn_sigmoid_calibration"`
}

// calibTable reads testdata/calib/table.csv: logit and prob columns of the
// same 200 rows, label "pos" or "neg".
func calibTable(t *testing.T) (logit, prob []float64, pos []bool, ref calibRef) {
	t.Helper()
	for _, r := range testtool.ReadCSV(t, "testdata/calib/table.csv")[1:] {
		l, err1 := strconv.ParseFloat(r[1], 64)
		p, err2 := strconv.ParseFloat(r[2], 64)
		if err1 != nil || err2 != nil {
			t.Fatalf("bad row %q", r)
		}
		logit, prob, pos = append(logit, l), append(prob, p), append(pos, r[3] == "pos")
	}
	b, err := os.ReadFile("testdata/calib/reference.json")
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, &ref); err != nil {
		t.Fatal(err)
	}
	if len(logit) != ref.Rows || ref.Rows != 200 {
		t.Fatalf("table has %d rows, reference %d", len(logit), ref.Rows)
	}
	return logit, prob, pos, ref
}

// TestIsotonicMatchesSklearn compares the isotonic fit with scikit-learn
// 1.2.1's IsotonicRegression(out_of_bounds="clip").fit(prob, label):
// the breakpoints (X_thresholds_, y_thresholds_) and predict() on a grid
// below, inside, between and above the steps, to 1e-9 (both compute the
// same weighted means and interpolations in float64, so only rounding
// order differs, ~1e-16).
func TestIsotonicMatchesSklearn(t *testing.T) {
	_, prob, pos, ref := calibTable(t)
	spec, err := Fit(MethodIsotonic, &FitTable{Scores: prob, Kind: KindProbability, Positive: pos}, 0)
	if err != nil {
		t.Fatal(err)
	}
	x, y := spec.Isotonic.X, spec.Isotonic.Y
	if len(x) != len(ref.Isotonic.XThresholds) {
		t.Fatalf("%d breakpoints, sklearn has %d", len(x), len(ref.Isotonic.XThresholds))
	}
	for i := range x {
		if math.Abs(x[i]-ref.Isotonic.XThresholds[i]) > 1e-9 || math.Abs(y[i]-ref.Isotonic.YThresholds[i]) > 1e-9 {
			t.Errorf("breakpoint %d: (%v, %v), sklearn (%v, %v)", i, x[i], y[i], ref.Isotonic.XThresholds[i], ref.Isotonic.YThresholds[i])
		}
	}
	cal, err := CalibratorFromManifest(spec)
	if err != nil {
		t.Fatal(err)
	}
	for i, g := range ref.Isotonic.Grid {
		if got, want := cal.Calibrate(g), ref.Isotonic.Predict[i]; math.Abs(got-want) > 1e-9 {
			t.Errorf("isotonic(%v) = %.15f, sklearn %.15f", g, got, want)
		}
	}
}

// TestIsotonicHandWorked checks pool-adjacent-violators on a case worked
// by hand: labels 1,0,0,1,1 at scores 1..5 pool the first three into
// 1/3; the tie at score 4 (labels 1 and 0) is merged first into 0.5 of
// weight 2, which then stays above 1/3.
func TestIsotonicHandWorked(t *testing.T) {
	x, y := FitIsotonic([]float64{3, 1, 2, 4, 4, 5}, []bool{false, true, false, true, false, true})
	wantX := []float64{1, 3, 4, 5}
	wantY := []float64{1.0 / 3, 1.0 / 3, 0.5, 1}
	if len(x) != len(wantX) {
		t.Fatalf("got %v %v, want %v %v", x, y, wantX, wantY)
	}
	for i := range x {
		if x[i] != wantX[i] || math.Abs(y[i]-wantY[i]) > 1e-15 {
			t.Fatalf("got %v %v, want %v %v", x, y, wantX, wantY)
		}
	}
	// Ties are averaged before pooling: score 1 holds labels 1,0 (0.5)
	// and score 2 holds 0,1,1,1 (0.75), already in order, so nothing pools.
	tx, ty := FitIsotonic([]float64{1, 2, 1, 2, 2, 2}, []bool{true, false, false, true, true, true})
	if len(tx) != 2 || tx[0] != 1 || tx[1] != 2 || ty[0] != 0.5 || ty[1] != 0.75 {
		t.Errorf("ties: got %v %v, want [1 2] [0.5 0.75]", tx, ty)
	}
	iso := Isotonic{X: x, Y: y}
	for _, c := range []struct{ p, want float64 }{{0, 1.0 / 3}, {3.5, (1.0/3 + 0.5) / 2}, {4.5, 0.75}, {9, 1}} {
		if got := iso.Calibrate(c.p); math.Abs(got-c.want) > 1e-15 {
			t.Errorf("Calibrate(%v) = %v, want %v", c.p, got, c.want)
		}
	}
}

// TestPlattMatchesReference compares A and B with two fits of Platt's
// smoothed-target cross-entropy made by make_reference.py: SciPy 1.10.1's
// minimize(method="trust-exact") with the exact gradient and Hessian, and
// scikit-learn 1.2.1's _SigmoidCalibration (the same objective and
// targets, but minimised by BFGS rather than the Newton method of Lin,
// Lin and Weng 2007, hence the separate SciPy fit). The two agree to
// ~1e-7; the check is 1e-4, on logits and on probabilities through
// logit(p).
func TestPlattMatchesReference(t *testing.T) {
	logit, prob, pos, ref := calibTable(t)
	for _, c := range []struct {
		kind   string
		scores []float64
		ref    plattRef
	}{
		{KindLogit, logit, ref.PlattLogit},
		{KindProbability, prob, ref.PlattProb},
	} {
		spec, err := Fit(MethodPlatt, &FitTable{Scores: c.scores, Kind: c.kind, Positive: pos}, 0)
		if err != nil {
			t.Fatal(err)
		}
		a, b := spec.Platt.A, spec.Platt.B
		for name, r := range map[string]struct{ A, B float64 }{"scipy": c.ref.Scipy, "sklearn": c.ref.Sklearn} {
			if math.Abs(a-r.A) > 1e-4 || math.Abs(b-r.B) > 1e-4 {
				t.Errorf("%s: A=%.8f B=%.8f, %s A=%.8f B=%.8f", c.kind, a, b, name, r.A, r.B)
			}
		}
		// The calibrator applies the same sigmoid to logit(p).
		cal, err := CalibratorFromManifest(spec)
		if err != nil {
			t.Fatal(err)
		}
		if got, want := cal.Calibrate(Sigmoid(1.5)), 1/(1+math.Exp(a*1.5+b)); math.Abs(got-want) > 1e-12 {
			t.Errorf("%s: Calibrate(sigmoid(1.5)) = %v, want %v", c.kind, got, want)
		}
	}
}

// TestTemperatureMatchesScipy compares T with SciPy 1.10.1's
// minimize_scalar(method="bounded", xatol=1e-10) of the same NLL on the
// logit column, to 1e-4.
func TestTemperatureMatchesScipy(t *testing.T) {
	logit, _, pos, ref := calibTable(t)
	spec, err := Fit(MethodTemperature, &FitTable{Scores: logit, Kind: KindLogit, Positive: pos}, 0)
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(spec.Temperature-ref.Temperature.T) > 1e-4 {
		t.Errorf("T = %.8f, scipy %.8f", spec.Temperature, ref.Temperature.T)
	}
	// The table's logits were doubled to be over-confident: T must soften.
	if !(spec.Temperature > 1) {
		t.Errorf("T = %v, want > 1", spec.Temperature)
	}
}

// TestPriorShiftHandWorked checks the formula of Saerens, Latinne and
// Decaestecker 2002 (eq. 2.4) on worked cases, and that shifting to the
// fitting prevalence changes nothing.
func TestPriorShiftHandWorked(t *testing.T) {
	// π = 0.5, π' = 0.2, p = 0.6: 0.4·0.6 / (0.4·0.6 + 1.6·0.4) = 0.24/0.88 = 3/11.
	if got := ShiftPrior(0.6, 0.5, 0.2); math.Abs(got-3.0/11) > 1e-15 {
		t.Errorf("ShiftPrior(0.6, 0.5, 0.2) = %v, want 3/11", got)
	}
	// π = 0.25, π' = 0.5, p = 0.5: 2·0.5 / (2·0.5 + (2/3)·0.5) = 3/4.
	if got := ShiftPrior(0.5, 0.25, 0.5); math.Abs(got-0.75) > 1e-15 {
		t.Errorf("ShiftPrior(0.5, 0.25, 0.5) = %v, want 0.75", got)
	}
	for _, p := range []float64{0, 1e-9, 0.2, 0.5, 0.77, 1} {
		if got := ShiftPrior(p, 0.315, 0.315); math.Abs(got-p) > 1e-15 {
			t.Errorf("ShiftPrior(%v) to the same prevalence = %v", p, got)
		}
	}
	cal, err := CalibratorFromManifest(CalibrationSpec{
		Method:     MethodPlatt,
		Platt:      &PlattParams{A: -1, B: 0},
		PriorShift: &PriorShiftParams{TrainPrevalence: 0.5, TargetPrevalence: 0.2},
	})
	if err != nil {
		t.Fatal(err)
	}
	// A = -1, B = 0 is the identity, so the prior shift alone acts.
	if cal.Method() != "platt+prior_shift" || math.Abs(cal.Calibrate(0.6)-3.0/11) > 1e-12 {
		t.Errorf("%s gives %v for 0.6, want platt+prior_shift and 3/11", cal.Method(), cal.Calibrate(0.6))
	}
}

// TestFitRecordsPriorShift checks that Fit stores the table's prevalence
// (63 positives of 200, from make_reference.py) beside the target.
func TestFitRecordsPriorShift(t *testing.T) {
	logit, _, pos, _ := calibTable(t)
	spec, err := Fit(MethodTemperature, &FitTable{Scores: logit, Kind: KindLogit, Positive: pos}, 0.1)
	if err != nil {
		t.Fatal(err)
	}
	if ps := spec.PriorShift; ps == nil || ps.TrainPrevalence != 63.0/200 || ps.TargetPrevalence != 0.1 {
		t.Errorf("prior shift %+v, want 0.315 -> 0.1", spec.PriorShift)
	}
}

func TestFitRefusesBadTables(t *testing.T) {
	for name, tab := range map[string]*FitTable{
		"one class":        {Scores: []float64{0.1, 0.2}, Kind: KindProbability, Positive: []bool{true, true}},
		"probability of 1": {Scores: []float64{0.1, 1}, Kind: KindProbability, Positive: []bool{true, false}},
		"NaN score":        {Scores: []float64{math.NaN(), 1}, Kind: KindLogit, Positive: []bool{true, false}},
		"empty":            {Kind: KindLogit},
	} {
		if _, err := Fit(MethodPlatt, tab, 0); err == nil {
			t.Errorf("%s: no error", name)
		} else if r, _ := midsag.ReasonOf(err); r != midsag.ReasonBadTable {
			t.Errorf("%s: reason %q (%v), want %s", name, r, err, midsag.ReasonBadTable)
		}
	}
	// Scores that fall as the label rises leave no T > 0.
	_, err := FitTemperature([]float64{2, 1, -1, -2}, []bool{false, false, true, true})
	if r, _ := midsag.ReasonOf(err); r != midsag.ReasonBadTable {
		t.Errorf("anti-correlated temperature fit: %v, want %s", err, midsag.ReasonBadTable)
	}
}

func TestCalibrationSpecValidation(t *testing.T) {
	for name, spec := range map[string]CalibrationSpec{
		"platt without params":    {Method: MethodPlatt},
		"platt NaN":               {Method: MethodPlatt, Platt: &PlattParams{A: math.NaN()}},
		"platt params, identity":  {Method: MethodIdentity, Platt: &PlattParams{A: -1}},
		"isotonic decreasing":     {Method: MethodIsotonic, Isotonic: &IsotonicParams{X: []float64{0.1, 0.2}, Y: []float64{0.5, 0.4}}},
		"isotonic repeated x":     {Method: MethodIsotonic, Isotonic: &IsotonicParams{X: []float64{0.1, 0.1}, Y: []float64{0.4, 0.5}}},
		"isotonic lengths":        {Method: MethodIsotonic, Isotonic: &IsotonicParams{X: []float64{0.1}, Y: []float64{}}},
		"isotonic y above 1":      {Method: MethodIsotonic, Isotonic: &IsotonicParams{X: []float64{0.1}, Y: []float64{1.5}}},
		"isotonic on temperature": {Method: MethodTemperature, Temperature: 2, Isotonic: &IsotonicParams{X: []float64{0.1}, Y: []float64{0.5}}},
		"prior shift of 0":        {Method: MethodIdentity, PriorShift: &PriorShiftParams{TrainPrevalence: 0, TargetPrevalence: 0.5}},
		"unknown method":          {Method: "beta"},
	} {
		if _, err := CalibratorFromManifest(spec); err == nil {
			t.Errorf("%s: accepted", name)
		} else if r, _ := midsag.ReasonOf(err); r != midsag.ReasonBadModel {
			t.Errorf("%s: reason %q, want bad_model", name, r)
		}
	}
}
