package evaluate

import (
	"errors"
	"fmt"
	"math"
	"sort"
)

// ErrOneClass is returned when the cases hold only positives or only
// negatives: the AUC and everything built on it is undefined.
var ErrOneClass = errors.New("AUC undefined: cases need at least one positive and one negative")

// z975 is the 0.975 quantile of the standard normal distribution, for
// two-sided 95% intervals (Abramowitz and Stegun 1964, table 26.5).
const z975 = 1.959963984540054

// Interval is a two-sided 95% confidence interval.
type Interval [2]float64

// AUCResult is an area under the ROC curve with its DeLong standard error
// and 95% confidence interval.
type AUCResult struct {
	Value float64
	SE    float64
	CI95  Interval
}

// split returns the scores of the positive and of the negative cases.
func split(scores []float64, labels []bool) (pos, neg []float64) {
	for i, s := range scores {
		if labels[i] {
			pos = append(pos, s)
		} else {
			neg = append(neg, s)
		}
	}
	return pos, neg
}

// midranks returns the midrank of each value in x: ties share the mean of
// the ranks they span (ranks start at 1). Sun and Xu 2014, section 3.
func midranks(x []float64) []float64 {
	idx := make([]int, len(x))
	for i := range idx {
		idx[i] = i
	}
	sort.SliceStable(idx, func(a, b int) bool { return x[idx[a]] < x[idx[b]] })
	r := make([]float64, len(x))
	for i := 0; i < len(idx); {
		j := i
		for j < len(idx) && x[idx[j]] == x[idx[i]] {
			j++
		}
		mid := float64(i+j+1) / 2 // mean of ranks i+1..j
		for k := i; k < j; k++ {
			r[idx[k]] = mid
		}
		i = j
	}
	return r
}

// placements returns the structural components of the AUC (DeLong, DeLong
// and Clarke-Pearson 1988, eq. 3-4): v10[i] is the fraction of negatives a
// positive case outscores (ties count one half), v01[j] the fraction of
// positives that outscore a negative case. They are computed from midranks
// in O(N log N) as in Sun and Xu 2014, eq. 9-10:
// v10 = (Tz - Tx)/n and v01 = 1 - (Tz - Ty)/m.
func placements(pos, neg []float64) (v10, v01 []float64) {
	m, n := len(pos), len(neg)
	z := append(append([]float64(nil), pos...), neg...)
	tz, tx, ty := midranks(z), midranks(pos), midranks(neg)
	v10 = make([]float64, m)
	for i := range pos {
		v10[i] = (tz[i] - tx[i]) / float64(n)
	}
	v01 = make([]float64, n)
	for j := range neg {
		v01[j] = 1 - (tz[m+j]-ty[j])/float64(m)
	}
	return v10, v01
}

// AUC returns the area under the empirical ROC curve: the probability that
// a positive case scores higher than a negative one, ties counting one half
// (the Mann-Whitney form; Hanley and McNeil 1982). Higher scores mean
// positive.
func AUC(scores []float64, labels []bool) (float64, error) {
	r, err := DeLong(scores, labels)
	return r.Value, err
}

// DeLong returns the AUC with its DeLong standard error and the 95%
// interval AUC ± 1.96·SE, clipped to [0, 1] (DeLong, DeLong and
// Clarke-Pearson 1988; fast algorithm of Sun and Xu 2014).
func DeLong(scores []float64, labels []bool) (AUCResult, error) {
	if len(scores) != len(labels) {
		return AUCResult{}, fmt.Errorf("delong: %d scores but %d labels", len(scores), len(labels))
	}
	pos, neg := split(scores, labels)
	if len(pos) == 0 || len(neg) == 0 {
		return AUCResult{}, ErrOneClass
	}
	v10, v01 := placements(pos, neg)
	auc := mean(v10)
	// DeLong et al. 1988, eq. 5: var = S10/m + S01/n with sample variances.
	se := math.Sqrt(sampleVar(v10, v10)/float64(len(pos)) + sampleVar(v01, v01)/float64(len(neg)))
	return AUCResult{Value: auc, SE: se, CI95: clipCI(auc-z975*se, auc+z975*se)}, nil
}

// Comparison is the paired DeLong test of two scores on the same cases.
type Comparison struct {
	AUC   [2]float64 // AUC of the first and of the second score
	Delta float64    // AUC[0] - AUC[1]
	SE    float64    // standard error of Delta
	Z     float64
	P     float64 // two-sided
}

// Compare runs the paired DeLong test of H0: AUC(a) = AUC(b) for two scores
// of the same cases (DeLong, DeLong and Clarke-Pearson 1988, section 3:
// var(A1-A2) = var1 + var2 - 2 cov12, with S10 and S01 covariance matrices
// of the placements). It fails when the variance of the difference is zero,
// where the test is undefined.
func Compare(a, b []float64, labels []bool) (Comparison, error) {
	if len(a) != len(labels) || len(b) != len(labels) {
		return Comparison{}, fmt.Errorf("compare: score columns of %d and %d for %d labels", len(a), len(b), len(labels))
	}
	pa, na := split(a, labels)
	pb, nb := split(b, labels)
	if len(pa) == 0 || len(na) == 0 {
		return Comparison{}, ErrOneClass
	}
	v10a, v01a := placements(pa, na)
	v10b, v01b := placements(pb, nb)
	m, n := float64(len(pa)), float64(len(na))
	varA := sampleVar(v10a, v10a)/m + sampleVar(v01a, v01a)/n
	varB := sampleVar(v10b, v10b)/m + sampleVar(v01b, v01b)/n
	cov := sampleVar(v10a, v10b)/m + sampleVar(v01a, v01b)/n
	c := Comparison{AUC: [2]float64{mean(v10a), mean(v10b)}}
	c.Delta = c.AUC[0] - c.AUC[1]
	v := varA + varB - 2*cov
	if !(v > 1e-15) {
		return c, errors.New("compare: the variance of the AUC difference is zero; the paired DeLong test is undefined")
	}
	c.SE = math.Sqrt(v)
	c.Z = c.Delta / c.SE
	c.P = math.Erfc(math.Abs(c.Z) / math.Sqrt2) // 2·(1 − Φ(|z|))
	return c, nil
}

func mean(x []float64) float64 {
	s := 0.0
	for _, v := range x {
		s += v
	}
	return s / float64(len(x))
}

// sampleVar returns the sample covariance of x and y (denominator len-1),
// zero for fewer than two values.
func sampleVar(x, y []float64) float64 {
	if len(x) < 2 {
		return 0
	}
	mx, my := mean(x), mean(y)
	s := 0.0
	for i := range x {
		s += (x[i] - mx) * (y[i] - my)
	}
	return s / float64(len(x)-1)
}

func clipCI(lo, hi float64) Interval {
	return Interval{math.Max(0, lo), math.Min(1, hi)}
}
