package evaluate

import (
	"errors"
	"fmt"
	"math"
)

// Brier returns the mean squared difference between probability and
// outcome (Brier 1950).
func Brier(probs []float64, labels []bool) float64 {
	s := 0.0
	for i, p := range probs {
		d := p - b2f(labels[i])
		s += d * d
	}
	return s / float64(len(probs))
}

// ECEBins is the number of equal-width bins on [0, 1] used for the expected
// calibration error and the reliability diagram (10 is common practice;
// Naeini, Cooper and Hauskrecht 2015 define ECE over such bins).
const ECEBins = 10

// Bin is one equal-width probability bin of a reliability diagram.
type Bin struct {
	Lo        float64 `json:"lo"`
	Hi        float64 `json:"hi"`
	N         int     `json:"n"`
	MeanProb  float64 `json:"mean_probability"`
	EventRate float64 `json:"event_rate"`
}

// Reliability puts probabilities into ECEBins equal-width bins
// [0, .1), [.1, .2), ... [.9, 1] and returns each bin's count, mean
// probability and observed event rate.
func Reliability(probs []float64, labels []bool) []Bin {
	bins := make([]Bin, ECEBins)
	for i := range bins {
		bins[i].Lo = float64(i) / ECEBins
		bins[i].Hi = float64(i+1) / ECEBins
	}
	for i, p := range probs {
		k := min(int(p*ECEBins), ECEBins-1)
		bins[k].N++
		bins[k].MeanProb += p
		bins[k].EventRate += b2f(labels[i])
	}
	for i := range bins {
		if bins[i].N > 0 {
			bins[i].MeanProb /= float64(bins[i].N)
			bins[i].EventRate /= float64(bins[i].N)
		}
	}
	return bins
}

// Diagnostics are the calibration measures midsag calibrate prints
// before and after a fit.
type Diagnostics struct {
	// NLL is the mean negative log-likelihood (log loss), natural log.
	NLL float64 `json:"nll"`
	// Brier is the mean squared difference between probability and label
	// (Brier 1950).
	Brier float64 `json:"brier"`
	// ECE is the expected calibration error over ECEBins equal-width bins.
	ECE float64 `json:"ece"`
}

// Diagnose returns NLL, Brier score and ECE of probs against labels.
func Diagnose(probs []float64, labels []bool) Diagnostics {
	return Diagnostics{NLL: LogLoss(probs, labels), Brier: Brier(probs, labels), ECE: ECE(probs, labels)}
}

// nllClip keeps log loss finite for a probability of exactly 0 or 1: it
// is float64 machine epsilon, as scikit-learn 1.2's log_loss(eps="auto")
// clips.
const nllClip = 0x1p-52

// LogLoss is the mean negative log-likelihood of the labels under probs.
func LogLoss(probs []float64, labels []bool) float64 {
	var s float64
	for i, q := range probs {
		c := math.Min(1-nllClip, math.Max(nllClip, q))
		if labels[i] {
			s -= math.Log(c)
		} else {
			s -= math.Log1p(-c)
		}
	}
	return s / float64(len(probs))
}

// ECE returns the expected calibration error: the count-weighted mean over
// the Reliability bins of |mean probability − event rate| (Naeini, Cooper
// and Hauskrecht 2015).
func ECE(probs []float64, labels []bool) float64 {
	e := 0.0
	for _, b := range Reliability(probs, labels) {
		e += float64(b.N) / float64(len(probs)) * math.Abs(b.MeanProb-b.EventRate)
	}
	return e
}

// logitClip keeps logit(p) finite for p of exactly 0 or 1 (common practice).
const logitClip = 1e-8

func logit(p float64) float64 {
	p = math.Min(math.Max(p, logitClip), 1-logitClip)
	return math.Log(p / (1 - p))
}

// ErrSeparated is returned when logit(p) separates the classes completely,
// so the logistic recalibration slope has no finite maximum-likelihood
// estimate.
var ErrSeparated = errors.New("calibration slope undefined: the probabilities separate the classes completely")

// CalibrationFit returns the calibration intercept and slope of logistic
// recalibration (Cox 1958): the slope is b of the two-parameter fit
// logit P(y=1) = a + b·logit(p); the intercept ("calibration-in-the-large")
// is a of the fit with the slope fixed at 1, logit P(y=1) = a + logit(p),
// as recommended by Steyerberg (Clinical Prediction Models, 2019, ch. 15).
// Both are maximum-likelihood fits by Newton's method. Perfect calibration
// gives intercept 0 and slope 1. When the slope is undefined (complete
// separation) the intercept is still returned, with ErrSeparated.
func CalibrationFit(probs []float64, labels []bool) (intercept, slope float64, err error) {
	x := make([]float64, len(probs))
	for i, p := range probs {
		x[i] = logit(p)
	}
	intercept, err = fitOffset(x, labels)
	if err != nil {
		return math.NaN(), math.NaN(), err
	}
	if separated(x, labels) {
		return intercept, math.NaN(), ErrSeparated
	}
	_, slope, err = fitLogistic(x, labels)
	return intercept, slope, err
}

// separated reports whether some cut on x puts all negatives at or below
// it and all positives at or above it, in either direction.
func separated(x []float64, labels []bool) bool {
	maxNeg, minPos := math.Inf(-1), math.Inf(1)
	maxPos, minNeg := math.Inf(-1), math.Inf(1)
	for i, v := range x {
		if labels[i] {
			minPos, maxPos = math.Min(minPos, v), math.Max(maxPos, v)
		} else {
			maxNeg, minNeg = math.Max(maxNeg, v), math.Min(minNeg, v)
		}
	}
	return maxNeg <= minPos || maxPos <= minNeg
}

func sigmoid(t float64) float64 { return 1 / (1 + math.Exp(-t)) }

// fitOffset maximises the log-likelihood of logit P = a + x over a.
func fitOffset(x []float64, y []bool) (float64, error) {
	a := 0.0
	for it := 0; it < 100; it++ {
		g, h := 0.0, 0.0
		for i, xi := range x {
			p := sigmoid(a + xi)
			g += b2f(y[i]) - p
			h += p * (1 - p)
		}
		if h == 0 {
			return 0, errors.New("calibration intercept: no information (all probabilities 0 or 1)")
		}
		step := g / h
		a += step
		if math.Abs(step) < 1e-10 {
			return a, nil
		}
	}
	return 0, errors.New("calibration intercept: Newton's method did not converge")
}

// fitLogistic maximises the log-likelihood of logit P = a + b·x.
func fitLogistic(x []float64, y []bool) (a, b float64, err error) {
	for it := 0; it < 100; it++ {
		var ga, gb, haa, hab, hbb float64
		for i, xi := range x {
			p := sigmoid(a + b*xi)
			r := b2f(y[i]) - p
			w := p * (1 - p)
			ga += r
			gb += r * xi
			haa += w
			hab += w * xi
			hbb += w * xi * xi
		}
		det := haa*hbb - hab*hab
		if !(det > 0) {
			return 0, 0, fmt.Errorf("calibration slope: singular information matrix (a constant probability?)")
		}
		da := (hbb*ga - hab*gb) / det
		db := (haa*gb - hab*ga) / det
		a += da
		b += db
		if math.Abs(da)+math.Abs(db) < 1e-10 {
			return a, b, nil
		}
	}
	return 0, 0, errors.New("calibration slope: Newton's method did not converge")
}

func b2f(b bool) float64 {
	if b {
		return 1
	}
	return 0
}
