package evaluate

import (
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"sort"
)

// KMStep is one step of a Kaplan–Meier curve: at Time, NRisk cases were
// still followed, NEvent had the event and NCensor were censored. Surv is
// the estimate just after Time; CI95 its log-transformed Greenwood
// interval, survfit's default conf.type "log" (Kalbfleisch and Prentice
// 2002, section 1.4), nil where Surv is 0.
type KMStep struct {
	Time    float64   `json:"time"`
	NRisk   int       `json:"n_risk"`
	NEvent  int       `json:"n_event"`
	NCensor int       `json:"n_censor"`
	Surv    float64   `json:"surv"`
	CI95    *Interval `json:"ci95"`
}

// timeTally is the count of events and censorings at each distinct time,
// ascending, with the number at risk just before it.
type timeTally struct {
	time          []float64
	risk, ev, cen []int
}

func tally(time []float64, event []bool) timeTally {
	idx := make([]int, len(time))
	for i := range idx {
		idx[i] = i
	}
	sort.SliceStable(idx, func(a, b int) bool { return time[idx[a]] < time[idx[b]] })
	var t timeTally
	left := len(time)
	for i := 0; i < len(idx); {
		j, d, c := i, 0, 0
		for j < len(idx) && time[idx[j]] == time[idx[i]] {
			if event[idx[j]] {
				d++
			} else {
				c++
			}
			j++
		}
		t.time = append(t.time, time[idx[i]])
		t.risk, t.ev, t.cen = append(t.risk, left), append(t.ev, d), append(t.cen, c)
		left -= j - i
		i = j
	}
	return t
}

// KaplanMeier returns the Kaplan–Meier product-limit estimate (Kaplan and
// Meier 1958) with a step at every distinct time, as R survival's survfit
// lists them. A case censored at an event time counts as at risk at it.
func KaplanMeier(time []float64, event []bool) []KMStep {
	t := tally(time, event)
	out := make([]KMStep, len(t.time))
	s, gw := 1.0, 0.0
	for i := range t.time {
		n, d := float64(t.risk[i]), float64(t.ev[i])
		s *= 1 - d/n
		if d > 0 && n > d {
			gw += d / (n * (n - d)) // Greenwood 1926
		}
		var ci *Interval
		if s > 0 {
			half := z975 * math.Sqrt(gw)
			ci = &Interval{s * math.Exp(-half), math.Min(1, s*math.Exp(half))}
		}
		out[i] = KMStep{Time: t.time[i], NRisk: t.risk[i], NEvent: t.ev[i], NCensor: t.cen[i], Surv: s, CI95: ci}
	}
	return out
}

// SurvAt returns the curve's value at time x (1 before the first step).
// With before true it is the value just before x, S(x−).
func SurvAt(km []KMStep, x float64, before bool) float64 {
	s := 1.0
	for _, st := range km {
		if st.Time > x || (before && st.Time == x) {
			break
		}
		s = st.Surv
	}
	return s
}

// censoring returns the Kaplan–Meier estimate of the censoring
// distribution G(t) = P(C > t): censorings are its events, and at a time
// shared with events the cases who had the event leave the risk set first,
// since they were no longer at risk of being censored (the convention of R
// survival's concordance, which fits G in its C routine fastkm1).
func censoring(time []float64, event []bool) []KMStep {
	t := tally(time, event)
	out := make([]KMStep, len(t.time))
	g := 1.0
	for i := range t.time {
		if n := t.risk[i] - t.ev[i]; n > 0 {
			g *= 1 - float64(t.cen[i])/float64(n)
		}
		out[i] = KMStep{Time: t.time[i], NRisk: t.risk[i] - t.ev[i], NEvent: t.cen[i], Surv: g}
	}
	return out
}

// Concordance is a C index: the share of comparable pairs in which the
// case with the event first has the higher risk score, ties in the score
// counting one half.
type Concordance struct {
	C           float64 `json:"c"`
	Concordant  float64 `json:"concordant"`
	Discordant  float64 `json:"discordant"`
	TiedRisk    float64 `json:"tied_risk"`
	Comparable  int     `json:"comparable_pairs"`
	Truncation  float64 `json:"truncation,omitempty"`
	Method      string  `json:"method"`
	Unavailable string  `json:"unavailable,omitempty"`
}

// MarshalJSON writes an undefined C as null.
func (c Concordance) MarshalJSON() ([]byte, error) {
	type plain Concordance
	return json.Marshal(struct {
		plain
		C *float64 `json:"c"`
	}{plain(c), finite(c.C)})
}

// MarshalJSON writes an undefined AUC as null.
func (a TimeAUC) MarshalJSON() ([]byte, error) {
	type plain TimeAUC
	return json.Marshal(struct {
		plain
		AUC *float64 `json:"auc"`
	}{plain(a), finite(a.AUC)})
}

// finite returns &x, or nil for NaN and infinities, which JSON cannot carry.
func finite(x float64) *float64 {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return nil
	}
	return &x
}

// concordance sums pair weights: pair (i, j) is comparable when i has the
// event at or before tau and j is followed longer (or censored at i's
// time); weight(i) weighs every pair led by i.
func concordance(risk, time []float64, event []bool, tau float64, weight func(i int) float64) Concordance {
	var c Concordance
	for i := range time {
		if !event[i] || time[i] > tau {
			continue
		}
		w := weight(i)
		for j := range time {
			if time[j] < time[i] || j == i || (time[j] == time[i] && event[j]) {
				continue
			}
			c.Comparable++
			switch {
			case risk[i] > risk[j]:
				c.Concordant += w
			case risk[i] < risk[j]:
				c.Discordant += w
			default:
				c.TiedRisk += w
			}
		}
	}
	if tot := c.Concordant + c.Discordant + c.TiedRisk; tot > 0 {
		c.C = (c.Concordant + c.TiedRisk/2) / tot
	} else {
		c.C = math.NaN()
		c.Unavailable = "no comparable pairs"
	}
	return c
}

// HarrellC returns Harrell's C (Harrell, Califf, Pryor, Lee and Rosati
// 1982) of a risk score, higher meaning earlier events; tau limits the
// pairs to those whose first event is at or before it (+Inf for all). It
// equals R survival's concordance(..., timewt = "n", ymax = tau, reverse =
// TRUE).
func HarrellC(risk, time []float64, event []bool, tau float64) Concordance {
	c := concordance(risk, time, event, tau, func(int) float64 { return 1 })
	c.Method = "Harrell's C (Harrell et al. 1982); tied risk scores count 1/2; a case censored at an event time is comparable"
	c.Truncation = finiteOrZero(tau)
	return c
}

// UnoC returns Uno's C (Uno, Cai, Pencina, D'Agostino and Wei 2011, eq. 5):
// each comparable pair led by an event at T_i ≤ tau weighs 1/G(T_i−)², G
// the Kaplan–Meier estimate of the censoring distribution, so the index
// does not depend on the study's censoring. It equals R survival's
// concordance(..., timewt = "n/G2", ymax = tau, reverse = TRUE).
func UnoC(risk, time []float64, event []bool, tau float64) Concordance {
	g := censoring(time, event)
	c := concordance(risk, time, event, tau, func(i int) float64 {
		gi := SurvAt(g, time[i], true)
		return 1 / (gi * gi)
	})
	c.Method = "Uno's C (Uno et al. 2011): pairs weighted by 1/G(T−)², G the Kaplan–Meier censoring distribution; truncated at τ"
	c.Truncation = finiteOrZero(tau)
	return c
}

func finiteOrZero(x float64) float64 {
	if math.IsInf(x, 0) || math.IsNaN(x) {
		return 0
	}
	return x
}

// TimeAUC is the cumulative/dynamic time-dependent AUC at one horizon.
type TimeAUC struct {
	Horizon float64 `json:"horizon"`
	AUC     float64 `json:"auc"`
	// Cases had the event by the horizon, Controls were followed past it,
	// CensoredBefore were censored before it: they are neither, and IPCW
	// gives their weight to those still followed.
	Cases          int       `json:"cases"`
	Controls       int       `json:"controls"`
	CensoredBefore int       `json:"censored_before"`
	CI95           *Interval `json:"bootstrap_ci95,omitempty"`
}

// ErrNoCases is returned for a horizon before which no event occurred or
// after which no case is still followed: the time-dependent AUC is
// undefined there.
var ErrNoCases = errors.New("time-dependent AUC undefined: the horizon needs an event before it and a case followed past it")

// TimeDependentAUC returns the cumulative/dynamic AUC at horizon h with
// inverse-probability-of-censoring weights (Uno, Cai, Tian and Wei 2007;
// Blanche, Dartigues and Jacqmin-Gadda 2013, eq. 3): cases (event at
// T ≤ h) weigh 1/G(T−), controls (T > h) weigh 1/G(h), cases censored
// before h weigh 0. Ties in the risk score count one half.
func TimeDependentAUC(risk, time []float64, event []bool, h float64) (TimeAUC, error) {
	g := censoring(time, event)
	r := TimeAUC{Horizon: h}
	var controls []float64
	for i := range time {
		switch {
		case time[i] > h:
			controls = append(controls, risk[i])
		case event[i]:
			r.Cases++
		default:
			r.CensoredBefore++
		}
	}
	r.Controls = len(controls)
	if r.Cases == 0 || r.Controls == 0 {
		r.AUC = math.NaN()
		return r, ErrNoCases
	}
	sort.Float64s(controls)
	num, den := 0.0, 0.0
	for i := range time {
		if time[i] > h || !event[i] {
			continue
		}
		w := 1 / SurvAt(g, time[i], true)
		lo := sort.SearchFloat64s(controls, risk[i])
		hi := sort.Search(len(controls), func(k int) bool { return controls[k] > risk[i] })
		num += w * (float64(lo) + float64(hi-lo)/2) / float64(len(controls))
		den += w
	}
	// The controls' common weight 1/G(h) cancels from the ratio.
	r.AUC = num / den
	return r, nil
}

// LogRank is the log-rank test of equal survival across groups (Mantel
// 1966; Peto and Peto 1972), as R survival's survdiff with rho = 0.
type LogRank struct {
	Groups   []string  `json:"groups"`
	N        []int     `json:"n"`
	Observed []float64 `json:"observed"`
	Expected []float64 `json:"expected"`
	ChiSq    float64   `json:"chisq"`
	DF       int       `json:"df"`
	PValue   float64   `json:"p_value"`
	Method   string    `json:"method"`
}

// LogRankTest compares the survival of the groups (group[i] indexes
// names). It fails with fewer than two non-empty groups or a singular
// variance (no events).
func LogRankTest(group []int, names []string, time []float64, event []bool) (LogRank, error) {
	k := len(names)
	lr := LogRank{Groups: names, N: make([]int, k), Observed: make([]float64, k), Expected: make([]float64, k),
		DF: k - 1, Method: "log-rank test (Mantel 1966), chi-square on k−1 degrees of freedom, as R survival's survdiff"}
	for _, g := range group {
		lr.N[g]++
	}
	t := tally(time, event)
	v := make([][]float64, k)
	for i := range v {
		v[i] = make([]float64, k)
	}
	for ti, x := range t.time {
		if t.ev[ti] == 0 {
			continue
		}
		nAt, dAt := make([]float64, k), make([]float64, k)
		for i := range time {
			if time[i] >= x {
				nAt[group[i]]++
				if time[i] == x && event[i] {
					dAt[group[i]]++
				}
			}
		}
		n, d := float64(t.risk[ti]), float64(t.ev[ti])
		f := 0.0
		if n > 1 {
			f = d * (n - d) / (n - 1)
		}
		for a := range k {
			lr.Observed[a] += dAt[a]
			lr.Expected[a] += d * nAt[a] / n
			for b := range k {
				delta := 0.0
				if a == b {
					delta = 1
				}
				v[a][b] += f * nAt[a] / n * (delta - nAt[b]/n)
			}
		}
	}
	if k < 2 {
		return lr, errors.New("log-rank: fewer than two groups")
	}
	diff := make([]float64, k-1)
	sub := make([][]float64, k-1)
	for a := range k - 1 {
		diff[a] = lr.Observed[a] - lr.Expected[a]
		sub[a] = append([]float64(nil), v[a][:k-1]...)
	}
	x, err := solve(sub, append([]float64(nil), diff...))
	if err != nil {
		return lr, fmt.Errorf("log-rank: %w", err)
	}
	for a := range diff {
		lr.ChiSq += diff[a] * x[a]
	}
	lr.PValue = chiSqUpper(lr.ChiSq, lr.DF)
	return lr, nil
}

// solve solves a·x = b by Gaussian elimination with partial pivoting.
func solve(a [][]float64, b []float64) ([]float64, error) {
	n := len(b)
	for c := range n {
		p := c
		for r := c + 1; r < n; r++ {
			if math.Abs(a[r][c]) > math.Abs(a[p][c]) {
				p = r
			}
		}
		if math.Abs(a[p][c]) < 1e-12 {
			return nil, errors.New("singular variance (no events, or a group without cases at risk)")
		}
		a[c], a[p] = a[p], a[c]
		b[c], b[p] = b[p], b[c]
		for r := c + 1; r < n; r++ {
			f := a[r][c] / a[c][c]
			for k := c; k < n; k++ {
				a[r][k] -= f * a[c][k]
			}
			b[r] -= f * b[c]
		}
	}
	x := make([]float64, n)
	for r := n - 1; r >= 0; r-- {
		s := b[r]
		for k := r + 1; k < n; k++ {
			s -= a[r][k] * x[k]
		}
		x[r] = s / a[r][r]
	}
	return x, nil
}

// chiSqUpper returns P(X > x) for X chi-square with df degrees of freedom:
// the regularized upper incomplete gamma Q(df/2, x/2), by its series below
// a+1 and its continued fraction above (Press et al., Numerical Recipes,
// 3rd ed., section 6.2).
func chiSqUpper(x float64, df int) float64 {
	a, z := float64(df)/2, x/2
	if z <= 0 {
		return 1
	}
	lg, _ := math.Lgamma(a)
	if z < a+1 {
		sum, term := 1/a, 1/a
		for n := 1; n < 1000; n++ {
			term *= z / (a + float64(n))
			sum += term
			if math.Abs(term) < math.Abs(sum)*1e-15 {
				break
			}
		}
		return 1 - sum*math.Exp(-z+a*math.Log(z)-lg)
	}
	const tiny = 1e-300
	b := z + 1 - a
	c, d := 1/tiny, 1/b
	h := d
	for i := 1; i < 1000; i++ {
		an := -float64(i) * (float64(i) - a)
		b += 2
		d = an*d + b
		if math.Abs(d) < tiny {
			d = tiny
		}
		c = b + an/c
		if math.Abs(c) < tiny {
			c = tiny
		}
		d = 1 / d
		del := d * c
		h *= del
		if math.Abs(del-1) < 1e-15 {
			break
		}
	}
	return math.Exp(-z+a*math.Log(z)-lg) * h
}
