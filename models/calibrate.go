package models

import (
	"math"

	"github.com/midsag/midsag"
)

// Calibrator maps an uncalibrated probability of the positive class to a
// calibrated one. Calibrators work on probabilities, not logits, so that
// every method (temperature, Platt, isotonic) has the same signature
// whatever the model's output kind; a method that needs the logit takes
// it back with Logit.
type Calibrator interface {
	// Method names the calibrator as it appears in results
	// ("identity", "temperature").
	Method() string
	// Calibrate returns the calibrated probability for p in [0,1].
	Calibrate(p float64) float64
}

// Identity is the calibrator that leaves probabilities unchanged.
type Identity struct{}

// Method returns "identity".
func (Identity) Method() string { return "identity" }

// Calibrate returns p.
func (Identity) Calibrate(p float64) float64 { return p }

// Temperature is temperature scaling: sigmoid(logit(p) / T), the one-
// parameter form of Platt scaling from Guo et al. 2017, "On Calibration of
// Modern Neural Networks" (ICML), section 4.2. T > 1 softens
// over-confident outputs, T < 1 sharpens them, T = 1 is the identity.
type Temperature struct{ T float64 }

// Method returns "temperature".
func (Temperature) Method() string { return "temperature" }

// Calibrate returns sigmoid(logit(p) / T). p of 0 or 1 stays 0 or 1.
func (t Temperature) Calibrate(p float64) float64 { return Sigmoid(Logit(p) / t.T) }

// CalibratorFromManifest builds the calibrator a manifest names. Errors
// carry midsag.ReasonBadModel.
func CalibratorFromManifest(c CalibrationSpec) (Calibrator, error) {
	switch c.Method {
	case "identity":
		if c.Temperature != 0 {
			return nil, midsag.Rejectf(midsag.ReasonBadModel, "manifest: calibration.temperature is set but method is identity")
		}
		return Identity{}, nil
	case "temperature":
		t := c.Temperature
		if !(t > 0) || math.IsInf(t, 0) {
			return nil, midsag.Rejectf(midsag.ReasonBadModel, "manifest: calibration.temperature must be positive and finite, got %v", t)
		}
		return Temperature{T: t}, nil
	default:
		return nil, midsag.Rejectf(midsag.ReasonBadModel, "manifest: calibration.method is %q, want identity or temperature", c.Method)
	}
}

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
