package models

import (
	"fmt"
	"math"
	"sort"

	"github.com/midsag/midsag"
)

// Calibrator maps an uncalibrated probability of the positive class to a
// calibrated one. Calibrators work on probabilities, not logits, so that
// every method (temperature, Platt, isotonic) has the same signature
// whatever the model's output kind; a method that needs the logit takes
// it back with Logit.
type Calibrator interface {
	// Method names the calibrator as it appears in results
	// ("identity", "temperature", "platt", "isotonic", with
	// "+prior_shift" appended when a prior shift follows).
	Method() string
	// Calibrate returns the calibrated probability for p in [0,1].
	Calibrate(p float64) float64
}

// Calibration method names, as CalibrationSpec.Method and results spell them.
const (
	MethodIdentity    = "identity"
	MethodTemperature = "temperature"
	MethodPlatt       = "platt"
	MethodIsotonic    = "isotonic"
)

// Identity is the calibrator that leaves probabilities unchanged.
type Identity struct{}

// Method returns "identity".
func (Identity) Method() string { return MethodIdentity }

// Calibrate returns p.
func (Identity) Calibrate(p float64) float64 { return p }

// Temperature is temperature scaling: sigmoid(logit(p) / T), the one-
// parameter form of Platt scaling from Guo et al. 2017, "On Calibration of
// Modern Neural Networks" (ICML), section 4.2. T > 1 softens
// over-confident outputs, T < 1 sharpens them, T = 1 is the identity.
type Temperature struct{ T float64 }

// Method returns "temperature".
func (Temperature) Method() string { return MethodTemperature }

// Calibrate returns sigmoid(logit(p) / T). p of 0 or 1 stays 0 or 1.
func (t Temperature) Calibrate(p float64) float64 { return Sigmoid(Logit(p) / t.T) }

// Platt is Platt scaling, P(y=1|f) = 1/(1+exp(A·f+B)) with f the raw
// score, in the sign convention of Platt 1999, "Probabilistic Outputs for
// Support Vector Machines and Comparisons to Regularized Likelihood
// Methods", eq. 1: a score that rises with the positive class has A < 0.
// f is logit(p), which is the model's own logit for a logit model.
type Platt struct{ A, B float64 }

// Method returns "platt".
func (Platt) Method() string { return MethodPlatt }

// Calibrate returns 1/(1+exp(A·logit(p)+B)).
func (c Platt) Calibrate(p float64) float64 {
	if c.A == 0 {
		// Spelled out so that p of 0 or 1 (an infinite logit) does not
		// turn 0·Inf into NaN.
		return Sigmoid(-c.B)
	}
	return Sigmoid(-(c.A*Logit(p) + c.B))
}

// Isotonic is a fitted isotonic regression: a non-decreasing piecewise
// linear map through the points (X[i], Y[i]), constant at Y[0] below X[0]
// and at Y[n-1] above X[n-1]. This is how scikit-learn's
// IsotonicRegression(out_of_bounds="clip") predicts. X is on the
// probability scale, the calibrator's input.
type Isotonic struct{ X, Y []float64 }

// Method returns "isotonic".
func (Isotonic) Method() string { return MethodIsotonic }

// Calibrate interpolates linearly between the breakpoints and clips
// outside them; NaN stays NaN.
func (c Isotonic) Calibrate(p float64) float64 {
	n := len(c.X)
	if math.IsNaN(p) {
		return p
	}
	if p <= c.X[0] {
		return c.Y[0]
	}
	if p >= c.X[n-1] {
		return c.Y[n-1]
	}
	// X[i-1] < p < X[i]: SearchFloat64s finds the first X[i] >= p.
	i := sort.SearchFloat64s(c.X, p)
	if c.X[i] == p {
		return c.Y[i]
	}
	w := (p - c.X[i-1]) / (c.X[i] - c.X[i-1])
	return c.Y[i-1] + w*(c.Y[i]-c.Y[i-1])
}

// PriorShift follows another calibrator with the prior-shift adjustment of
// Saerens, Latinne and Decaestecker 2002, "Adjusting the Outputs of a
// Classifier to New a Priori Probabilities: A Simple Procedure" (Neural
// Computation 14(1)), eq. 2.4, for two classes:
//
//	p' = (π'/π)·p / ((π'/π)·p + ((1−π')/(1−π))·(1−p))
//
// with π the positive prevalence of the data the calibrator was fitted on
// and π' the prevalence where it is used.
type PriorShift struct {
	Base   Calibrator
	Train  float64
	Target float64
}

// Method returns the base method with "+prior_shift" appended.
func (c PriorShift) Method() string { return c.Base.Method() + "+prior_shift" }

// Calibrate applies the base calibrator, then the prior shift.
func (c PriorShift) Calibrate(p float64) float64 {
	return ShiftPrior(c.Base.Calibrate(p), c.Train, c.Target)
}

// ShiftPrior moves a probability p fitted under positive prevalence train
// to positive prevalence target (Saerens et al. 2002, eq. 2.4). p of 0 or
// 1 stays put; train == target is the identity.
func ShiftPrior(p, train, target float64) float64 {
	pos := target / train * p
	neg := (1 - target) / (1 - train) * (1 - p)
	return pos / (pos + neg)
}

// CalibratorFromManifest builds the calibrator a manifest names. Errors
// carry midsag.ReasonBadModel.
func CalibratorFromManifest(c CalibrationSpec) (Calibrator, error) {
	bad := func(format string, args ...any) error {
		return midsag.Rejectf(midsag.ReasonBadModel, "manifest: calibration."+format, args...)
	}
	switch c.Method {
	case MethodIdentity, MethodTemperature, MethodPlatt, MethodIsotonic:
	default:
		return nil, bad("method is %q, want identity, temperature, platt or isotonic", c.Method)
	}
	// Parameters of one method next to another method's name mean the
	// manifest was edited by hand and half-finished; refuse rather than guess.
	if c.Method != MethodTemperature && c.Temperature != 0 {
		return nil, bad("temperature is set but method is %s", c.Method)
	}
	if c.Method != MethodPlatt && c.Platt != nil {
		return nil, bad("platt is set but method is %s", c.Method)
	}
	if c.Method != MethodIsotonic && c.Isotonic != nil {
		return nil, bad("isotonic is set but method is %s", c.Method)
	}
	var cal Calibrator
	switch c.Method {
	case MethodIdentity:
		cal = Identity{}
	case MethodTemperature:
		t := c.Temperature
		if !(t > 0) || math.IsInf(t, 0) {
			return nil, bad("temperature must be positive and finite, got %v", t)
		}
		cal = Temperature{T: t}
	case MethodPlatt:
		p := c.Platt
		if p == nil {
			return nil, bad("platt {a, b} is required for method platt")
		}
		if !finite(p.A) || !finite(p.B) {
			return nil, bad("platt a and b must be finite, got %v and %v", p.A, p.B)
		}
		cal = Platt{A: p.A, B: p.B}
	case MethodIsotonic:
		iso := c.Isotonic
		if iso == nil {
			return nil, bad("isotonic {x, y} is required for method isotonic")
		}
		if err := checkIsotonic(iso); err != nil {
			return nil, bad("isotonic: %v", err)
		}
		cal = Isotonic{X: append([]float64(nil), iso.X...), Y: append([]float64(nil), iso.Y...)}
	}
	if ps := c.PriorShift; ps != nil {
		if !(ps.TrainPrevalence > 0 && ps.TrainPrevalence < 1) || !(ps.TargetPrevalence > 0 && ps.TargetPrevalence < 1) {
			return nil, bad("prior_shift prevalences must be strictly between 0 and 1, got train %v and target %v",
				ps.TrainPrevalence, ps.TargetPrevalence)
		}
		cal = PriorShift{Base: cal, Train: ps.TrainPrevalence, Target: ps.TargetPrevalence}
	}
	return cal, nil
}

// checkIsotonic requires breakpoints that Isotonic.Calibrate can use and
// that keep the map a non-decreasing probability.
func checkIsotonic(iso *IsotonicParams) error {
	if len(iso.X) == 0 || len(iso.X) != len(iso.Y) {
		return fmt.Errorf("x and y need the same non-zero length, got %d and %d", len(iso.X), len(iso.Y))
	}
	for i := range iso.X {
		if !finite(iso.X[i]) || !(iso.Y[i] >= 0 && iso.Y[i] <= 1) {
			return fmt.Errorf("point %d (%v, %v): x must be finite and y in [0,1]", i, iso.X[i], iso.Y[i])
		}
		if i > 0 && !(iso.X[i] > iso.X[i-1] && iso.Y[i] >= iso.Y[i-1]) {
			return fmt.Errorf("point %d (%v, %v): x must increase strictly and y must not decrease", i, iso.X[i], iso.Y[i])
		}
	}
	return nil
}

func finite(x float64) bool { return !math.IsNaN(x) && !math.IsInf(x, 0) }

// Sigmoid is the logistic function 1/(1+e^-x), written in the two-branch
// form so that large |x| neither overflows nor loses the small tail.
func Sigmoid(x float64) float64 {
	if x >= 0 {
		return 1 / (1 + math.Exp(-x))
	}
	e := math.Exp(x)
	return e / (1 + e)
}

// Logit is the inverse of Sigmoid, log(p/(1-p)); it is -Inf at 0 and +Inf
// at 1.
func Logit(p float64) float64 { return math.Log(p) - math.Log1p(-p) }
