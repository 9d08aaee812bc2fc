package evaluate

import (
	"fmt"
	"math"
)

// Proportion is k of n with its Wilson 95% interval.
type Proportion struct {
	K     int      `json:"k"`
	N     int      `json:"n"`
	Value float64  `json:"value"`
	CI95  Interval `json:"ci95"`
}

// Wilson returns k/n with the Wilson score 95% interval (Wilson 1927;
// Newcombe 1998, method 3). For n = 0 the value and interval are 0 and
// [0, 1]: nothing is known.
func Wilson(k, n int) Proportion {
	if n == 0 {
		return Proportion{CI95: Interval{0, 1}}
	}
	p := float64(k) / float64(n)
	nf := float64(n)
	z2 := z975 * z975
	den := 1 + z2/nf
	center := (p + z2/(2*nf)) / den
	half := z975 / den * math.Sqrt(p*(1-p)/nf+z2/(4*nf*nf))
	return Proportion{K: k, N: n, Value: p, CI95: clipCI(center-half, center+half)}
}

// McNemar returns the two-sided p-value of McNemar's exact test on the
// discordant counts b and c: a binomial test of b against Binomial(b+c, ½),
// p = min(1, 2·P(X ≤ min(b, c))) (McNemar 1947; exact form as in
// statsmodels' mcnemar(exact=True)). With no discordant pairs p is 1.
func McNemar(b, c int) (float64, error) {
	if b < 0 || c < 0 {
		return 0, fmt.Errorf("mcnemar: negative count (%d, %d)", b, c)
	}
	n := b + c
	k := min(b, c)
	// Sum the binomial probabilities in log space so large n cannot overflow.
	cdf := 0.0
	for i := 0; i <= k; i++ {
		lg := lchoose(n, i) - float64(n)*math.Ln2
		cdf += math.Exp(lg)
	}
	return math.Min(1, 2*cdf), nil
}

func lchoose(n, k int) float64 {
	a, _ := math.Lgamma(float64(n + 1))
	b, _ := math.Lgamma(float64(k + 1))
	c, _ := math.Lgamma(float64(n - k + 1))
	return a - b - c
}
