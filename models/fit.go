package models

import (
	"fmt"
	"math"
	"sort"

	"github.com/midsag/midsag"
)

// FitTable is a validation table of raw model outputs and labels.
type FitTable struct {
	// Scores are the model's raw outputs, one per row.
	Scores []float64
	// Kind says what Scores are: KindLogit or KindProbability.
	Kind string
	// Positive[i] is true when row i belongs to the positive class.
	Positive []bool
}

// Probabilities returns the uncalibrated probability of each row:
// sigmoid(score) for logits, the score itself for probabilities.
func (t *FitTable) Probabilities() []float64 {
	p := make([]float64, len(t.Scores))
	for i, s := range t.Scores {
		if t.Kind == KindLogit {
			s = Sigmoid(s)
		}
		p[i] = s
	}
	return p
}

// logits returns f = the raw score for logits, logit(p) for probabilities:
// the scale temperature and Platt scaling are fitted on.
func (t *FitTable) logits() []float64 {
	f := make([]float64, len(t.Scores))
	for i, s := range t.Scores {
		if t.Kind == KindProbability {
			s = Logit(s)
		}
		f[i] = s
	}
	return f
}

// Prevalence returns the share of positive rows.
func (t *FitTable) Prevalence() float64 {
	n := 0
	for _, y := range t.Positive {
		if y {
			n++
		}
	}
	return float64(n) / float64(len(t.Positive))
}

// Check refuses tables a calibrator cannot be fitted on, with
// midsag.ReasonBadTable.
func (t *FitTable) Check() error {
	if t.Kind != KindLogit && t.Kind != KindProbability {
		return fmt.Errorf("fit table: score kind is %q, want logit or probability", t.Kind)
	}
	if len(t.Scores) != len(t.Positive) {
		return fmt.Errorf("fit table: %d scores but %d labels", len(t.Scores), len(t.Positive))
	}
	if len(t.Scores) == 0 {
		return midsag.Rejectf(midsag.ReasonBadTable, "the table has no rows")
	}
	for i, s := range t.Scores {
		if !finite(s) {
			return midsag.Rejectf(midsag.ReasonBadTable, "row %d: score %v is not finite", i+1, s)
		}
		// Temperature and Platt scaling fit on logit(p), infinite at 0 and 1.
		if t.Kind == KindProbability && !(s > 0 && s < 1) {
			return midsag.Rejectf(midsag.ReasonBadTable, "row %d: probability score %v is not strictly between 0 and 1", i+1, s)
		}
	}
	if pi := t.Prevalence(); pi == 0 || pi == 1 {
		return midsag.Rejectf(midsag.ReasonBadTable, "all %d rows have the same label; calibration needs both classes", len(t.Positive))
	}
	return nil
}

// Fit fits a calibrator of the given method (MethodTemperature,
// MethodPlatt or MethodIsotonic) on the table. A targetPrevalence in
// (0,1) adds a prior shift from the table's prevalence to it; 0 adds none.
// Table problems carry midsag.ReasonBadTable.
func Fit(method string, t *FitTable, targetPrevalence float64) (CalibrationSpec, error) {
	if err := t.Check(); err != nil {
		return CalibrationSpec{}, err
	}
	if targetPrevalence != 0 && !(targetPrevalence > 0 && targetPrevalence < 1) {
		return CalibrationSpec{}, fmt.Errorf("fit: target prevalence must be strictly between 0 and 1, got %v", targetPrevalence)
	}
	spec := CalibrationSpec{Method: method}
	switch method {
	case MethodTemperature:
		temp, err := FitTemperature(t.logits(), t.Positive)
		if err != nil {
			return CalibrationSpec{}, err
		}
		spec.Temperature = temp
	case MethodPlatt:
		a, b, err := FitPlatt(t.logits(), t.Positive)
		if err != nil {
			return CalibrationSpec{}, err
		}
		spec.Platt = &PlattParams{A: a, B: b}
	case MethodIsotonic:
		x, y := FitIsotonic(t.Probabilities(), t.Positive)
		spec.Isotonic = &IsotonicParams{X: x, Y: y}
	default:
		return CalibrationSpec{}, fmt.Errorf("fit: method is %q, want temperature, platt or isotonic", method)
	}
	if targetPrevalence != 0 {
		spec.PriorShift = &PriorShiftParams{TrainPrevalence: t.Prevalence(), TargetPrevalence: targetPrevalence}
	}
	return spec, nil
}

// FitTemperature returns the temperature T > 0 that minimises the negative
// log-likelihood of sigmoid(f/T) on the labels (Guo et al. 2017, section
// 4.2). It runs Newton's method with a backtracking line search on
// β = 1/T, where the NLL is that of a one-feature logistic regression
// without intercept and so convex: Newton converges from β = 1 without
// the local minima a search on T or log T could meet. Scores that do not
// rise with the positive class (β ≤ 0) or separate the classes perfectly
// (β → ∞) have no finite positive T and are refused with midsag.ReasonBadTable.
func FitTemperature(f []float64, positive []bool) (float64, error) {
	nll := func(beta float64) float64 {
		s := 0.0
		for i, z := range f {
			s += logLoss(beta*z, positive[i])
		}
		return s
	}
	beta := 1.0
	val := nll(beta)
	for it := 0; it < 100; it++ {
		// d/dβ of −[y log σ(βz) + (1−y) log(1−σ(βz))] is (σ(βz) − y)·z,
		// the second derivative σ(1−σ)·z².
		g, h := 0.0, 0.0
		for i, z := range f {
			p := Sigmoid(beta * z)
			g += (p - y01(positive[i])) * z
			h += p * (1 - p) * z * z
		}
		if math.Abs(g) < 1e-10*float64(len(f)) {
			break
		}
		if !(h > 0) {
			return 0, midsag.Rejectf(midsag.ReasonBadTable, "temperature scaling: the NLL is flat in 1/T (every score is 0, or the classes are separated)")
		}
		step := -g / h
		// Backtracking with the Armijo constant 1e-4, as in Lin, Lin and
		// Weng 2007 (Algorithm 1) for the two-parameter Platt fit.
		s := 1.0
		for ; s >= 1e-10; s /= 2 {
			if nv := nll(beta + s*step); nv < val+1e-4*s*g*step {
				beta += s * step
				val = nv
				break
			}
		}
		if s < 1e-10 {
			break
		}
		if beta > 1e6 {
			return 0, midsag.Rejectf(midsag.ReasonBadTable, "temperature scaling: the scores separate the classes perfectly, so T goes to 0")
		}
	}
	if !(beta > 0) {
		return 0, midsag.Rejectf(midsag.ReasonBadTable, "temperature scaling: the scores fall as the positive class rises (best 1/T = %.4g), so no T > 0 fits", beta)
	}
	return 1 / beta, nil
}

// FitPlatt fits Platt scaling, P(y=1|f) = 1/(1+exp(A·f+B)), to the scores
// f (Platt 1999). The targets are smoothed as Platt proposes (section
// 2.2), t+ = (N+ + 1)/(N+ + 2) for positives and t− = 1/(N− + 2) for
// negatives, and the cross-entropy to them is minimised by Newton's method
// with a backtracking line search, as in Algorithm 1 of Lin, Lin and Weng
// 2007, "A note on Platt's probabilistic outputs for support vector
// machines" (Machine Learning 68): start A = 0, B = log((N− + 1)/(N+ + 1)),
// Hessian ridge σ = 1e-12, Armijo constant 1e-4, minimum step 1e-10, at
// most 100 iterations. The stopping tolerance on the gradient is 1e-10 per
// row rather than their 1e-5 so that A and B settle to well below the
// 1e-4 the tests ask of them.
func FitPlatt(f []float64, positive []bool) (a, b float64, err error) {
	var nPos, nNeg float64
	for _, y := range positive {
		if y {
			nPos++
		} else {
			nNeg++
		}
	}
	hi, lo := (nPos+1)/(nPos+2), 1/(nNeg+2)
	target := make([]float64, len(f))
	for i, y := range positive {
		target[i] = lo
		if y {
			target[i] = hi
		}
	}
	obj := func(a, b float64) float64 {
		s := 0.0
		for i, z := range f {
			// With u = A·f + B and P = 1/(1+e^u): −t log P − (1−t) log(1−P)
			// = t·u + log(1+e^−u), evaluated without overflow (LLW 2007).
			u := a*z + b
			if u >= 0 {
				s += target[i]*u + math.Log1p(math.Exp(-u))
			} else {
				s += (target[i]-1)*u + math.Log1p(math.Exp(u))
			}
		}
		return s
	}
	a, b = 0, math.Log((nNeg+1)/(nPos+1))
	val := obj(a, b)
	const sigma, minStep = 1e-12, 1e-10
	for it := 0; it < 100; it++ {
		h11, h22, h21, g1, g2 := sigma, sigma, 0.0, 0.0, 0.0
		for i, z := range f {
			p := Sigmoid(-(a*z + b)) // P(y=1)
			d2 := p * (1 - p)
			h11 += z * z * d2
			h22 += d2
			h21 += z * d2
			d1 := target[i] - p
			g1 += z * d1
			g2 += d1
		}
		if tol := 1e-10 * float64(len(f)); math.Abs(g1) < tol && math.Abs(g2) < tol {
			return a, b, nil
		}
		det := h11*h22 - h21*h21
		da := -(h22*g1 - h21*g2) / det
		db := -(-h21*g1 + h11*g2) / det
		gd := g1*da + g2*db
		step := 1.0
		for ; step >= minStep; step /= 2 {
			na, nb := a+step*da, b+step*db
			if nv := obj(na, nb); nv < val+1e-4*step*gd {
				a, b, val = na, nb, nv
				break
			}
		}
		if step < minStep {
			// LLW 2007 stop here too: no step lowers the objective, so
			// (A, B) is as close to the minimum as float64 allows.
			return a, b, nil
		}
	}
	return a, b, nil
}

// FitIsotonic fits a non-decreasing map from score to label by the
// pool-adjacent-violators algorithm (Ayer et al. 1955; Barlow et al. 1972)
// and returns its breakpoints for Isotonic: rows with equal scores are
// first merged into one point weighted by their count with the mean label,
// as scikit-learn 1.2's IsotonicRegression does, and points inside a flat
// run are dropped since linear interpolation passes through them anyway.
func FitIsotonic(score []float64, positive []bool) (x, y []float64) {
	idx := make([]int, len(score))
	for i := range idx {
		idx[i] = i
	}
	sort.Slice(idx, func(i, j int) bool { return score[idx[i]] < score[idx[j]] })
	// Merge equal scores into one weighted point first: PAV never splits a
	// pool, so a tie met after its neighbours were pooled would be
	// pooled wrongly with them.
	var ux, uy, uw []float64
	for _, i := range idx {
		v := y01(positive[i])
		if n := len(ux); n > 0 && ux[n-1] == score[i] {
			uw[n-1]++
			uy[n-1] += (v - uy[n-1]) / uw[n-1]
			continue
		}
		ux, uy, uw = append(ux, score[i]), append(uy, v), append(uw, 1)
	}
	// Blocks of the PAV stack: the mean label, weight and highest score.
	type block struct{ mean, w, last float64 }
	var blocks []block
	for k := range ux {
		blocks = append(blocks, block{mean: uy[k], w: uw[k], last: ux[k]})
		// Pool while the last two blocks violate monotonicity.
		for len(blocks) > 1 && blocks[len(blocks)-2].mean > blocks[len(blocks)-1].mean {
			b2, b1 := blocks[len(blocks)-1], blocks[len(blocks)-2]
			w := b1.w + b2.w
			blocks = blocks[:len(blocks)-1]
			blocks[len(blocks)-1] = block{mean: (b1.mean*b1.w + b2.mean*b2.w) / w, w: w, last: b2.last}
		}
	}
	// Expand block means back onto the unique scores.
	fitted := make([]float64, 0, len(ux))
	k := 0
	for _, bl := range blocks {
		for ; k < len(ux) && ux[k] <= bl.last; k++ {
			fitted = append(fitted, bl.mean)
		}
	}
	for i := range ux {
		if i > 0 && i < len(ux)-1 && fitted[i] == fitted[i-1] && fitted[i] == fitted[i+1] {
			continue
		}
		x = append(x, ux[i])
		y = append(y, fitted[i])
	}
	return x, y
}

// logLoss is −log P(label) for P(y=1) = sigmoid(u), computed from u so
// that it stays finite and exact for large |u|.
func logLoss(u float64, positive bool) float64 {
	if !positive {
		u = -u
	}
	// −log σ(u) = log(1 + e^−u).
	if u >= 0 {
		return math.Log1p(math.Exp(-u))
	}
	return -u + math.Log1p(math.Exp(u))
}

func y01(positive bool) float64 {
	if positive {
		return 1
	}
	return 0
}
