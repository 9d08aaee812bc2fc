package evaluate

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"sort"

	"github.com/midsag/midsag"
)

// Risk-group rules for the Kaplan–Meier curves.
const (
	GroupsDecision = "decision" // the model's call at the operating point
	GroupsTertiles = "tertiles" // thirds of the score
)

// SurvivalOptions chooses the horizons and risk groups of a time-to-event
// evaluation.
type SurvivalOptions struct {
	TimeUnit string    // for the output only, e.g. "months"
	Horizons []float64 // time-dependent AUC horizons; the median follow-up time when empty
	Tau      float64   // truncation time of Uno's C; the last horizon when 0
	Groups   string    // GroupsDecision or GroupsTertiles
	// Threshold is the decision threshold for GroupsDecision.
	Threshold float64
}

// SurvivalSummary is a time-to-event evaluation of the score read as a
// risk (higher means an earlier event).
type SurvivalSummary struct {
	N         int            `json:"n"`
	Events    int            `json:"events"`
	Censored  int            `json:"censored"`
	TimeUnit  string         `json:"time_unit"`
	FollowUp  *float64       `json:"median_follow_up"` // nil when not reached
	FUMethod  string         `json:"median_follow_up_method"`
	Harrell   Concordance    `json:"harrell_c"`
	Uno       Concordance    `json:"uno_c"`
	TimeAUC   []TimeAUC      `json:"time_auc"`
	AUCMethod string         `json:"time_auc_method"`
	Handling  string         `json:"censoring_handling"`
	Groups    string         `json:"risk_groups"`
	Curves    []GroupCurve   `json:"curves"`
	LogRank   *LogRank       `json:"log_rank,omitempty"`
	Bootstrap *SurvBootstrap `json:"bootstrap,omitempty"`
	Warnings  []string       `json:"-"`
	horizons  []float64      // as chosen, for the plots
	scoreName string         // for the plots
}

// GroupCurve is one risk group's Kaplan–Meier curve and its value at each
// horizon.
type GroupCurve struct {
	Name   string      `json:"name"`
	N      int         `json:"n"`
	Events int         `json:"events"`
	Steps  []KMStep    `json:"steps"`
	AtH    []HorizonKM `json:"at_horizons"`
}

// HorizonKM is a Kaplan–Meier estimate read at a horizon, with how many of
// the group were censored before it (they count as at risk until
// censored, not as event-free).
type HorizonKM struct {
	Horizon        float64   `json:"horizon"`
	Surv           float64   `json:"surv"`
	CI95           *Interval `json:"ci95"`
	AtRisk         int       `json:"at_risk"`
	CensoredBefore int       `json:"censored_before"`
}

// SurvBootstrap holds the percentile intervals of the concordance indices
// over case-resampling bootstrap replicates.
type SurvBootstrap struct {
	Replicates int      `json:"replicates"`
	Seed       uint64   `json:"seed"`
	Method     string   `json:"method"`
	Harrell    Interval `json:"harrell_c_ci95"`
	Uno        Interval `json:"uno_c_ci95"`
}

// RunSurvival evaluates the score against the table's follow-up times and
// events. With bootstrap > 0 the time-dependent AUCs and both C indices get
// percentile intervals from that many case-resampling replicates.
func RunSurvival(t *Table, o SurvivalOptions, scoreName string, bootstrap int, seed uint64) (*SurvivalSummary, error) {
	if t.Times == nil {
		return nil, errors.New("survival: the table has no time column")
	}
	s := &SurvivalSummary{N: len(t.Times), TimeUnit: o.TimeUnit, scoreName: scoreName, Groups: o.Groups}
	for _, e := range t.Events {
		if e {
			s.Events++
		}
	}
	s.Censored = s.N - s.Events
	if s.Events == 0 {
		return nil, midsag.Rejectf(midsag.ReasonBadTable, "survival: %d cases and no event: nothing to evaluate", s.N)
	}
	s.FollowUp = finite(medianKM(censoring(t.Times, t.Events)))
	s.FUMethod = "reverse Kaplan–Meier median (Schemper and Smith 1996): events count as censored follow-up"
	s.horizons = o.Horizons
	if len(s.horizons) == 0 {
		s.horizons = []float64{median(t.Times)}
		s.Warnings = append(s.Warnings, fmt.Sprintf("no --horizon: the median observed time %.4g is used", s.horizons[0]))
	}
	sort.Float64s(s.horizons)
	tau := o.Tau
	if tau == 0 {
		tau = s.horizons[len(s.horizons)-1]
	}
	s.Harrell = HarrellC(t.Scores, t.Times, t.Events, math.Inf(1))
	s.Uno = UnoC(t.Scores, t.Times, t.Events, tau)
	s.AUCMethod = "cumulative/dynamic AUC(t) with inverse-probability-of-censoring weights (Uno et al. 2007; Blanche, Dartigues and Jacqmin-Gadda 2013): cases T ≤ t with an event, controls T > t"
	s.Handling = "time-dependent AUC: a case censored before the horizon is neither case nor control; IPCW (1/G) gives its weight to those still followed. " +
		"Kaplan–Meier: it counts as at risk until censored. No censored case is counted as event-free."
	for _, h := range s.horizons {
		a, err := TimeDependentAUC(t.Scores, t.Times, t.Events, h)
		if err != nil {
			s.Warnings = append(s.Warnings, fmt.Sprintf("horizon %.4g: %v", h, err))
		}
		s.TimeAUC = append(s.TimeAUC, a)
	}
	if err := s.riskGroups(t, o); err != nil {
		return nil, err
	}
	if bootstrap > 0 {
		s.bootstrap(t, tau, bootstrap, seed)
	}
	return s, nil
}

// riskGroups splits the cases, draws each group's curve and tests them.
func (s *SurvivalSummary) riskGroups(t *Table, o SurvivalOptions) error {
	group, names := tertiles(t.Scores)
	if o.Groups == GroupsDecision {
		group, names = decisionGroups(t.Scores, o.Threshold)
		s.Groups = fmt.Sprintf("model decision: score ≥ %.4g is high risk", o.Threshold)
	} else {
		s.Groups = "tertiles of the score (type-7 quantiles at 1/3 and 2/3): " + names[0] + ", " + names[1] + ", " + names[2]
	}
	group, names = dropEmpty(group, names)
	for g, name := range names {
		var tm []float64
		var ev []bool
		for i := range group {
			if group[i] == g {
				tm, ev = append(tm, t.Times[i]), append(ev, t.Events[i])
			}
		}
		c := GroupCurve{Name: name, N: len(tm), Steps: KaplanMeier(tm, ev)}
		for _, e := range ev {
			if e {
				c.Events++
			}
		}
		for _, h := range s.horizons {
			c.AtH = append(c.AtH, kmAt(c.Steps, tm, ev, h))
		}
		s.Curves = append(s.Curves, c)
	}
	if len(names) < 2 {
		s.Warnings = append(s.Warnings, "one risk group only: no log-rank test")
		return nil
	}
	lr, err := LogRankTest(group, names, t.Times, t.Events)
	if err != nil {
		s.Warnings = append(s.Warnings, err.Error())
		return nil
	}
	s.LogRank = &lr
	return nil
}

// kmAt reads a group's curve at horizon h.
func kmAt(steps []KMStep, time []float64, event []bool, h float64) HorizonKM {
	r := HorizonKM{Horizon: h, Surv: 1, CI95: &Interval{1, 1}}
	for _, st := range steps {
		if st.Time > h {
			break
		}
		r.Surv, r.CI95 = st.Surv, st.CI95
	}
	for i := range time {
		switch {
		case time[i] > h:
			r.AtRisk++
		case !event[i] && time[i] < h:
			r.CensoredBefore++
		}
	}
	return r
}

func decisionGroups(scores []float64, th float64) ([]int, []string) {
	g := make([]int, len(scores))
	for i, v := range scores {
		if v >= th {
			g[i] = 1
		}
	}
	return g, []string{fmt.Sprintf("low risk (< %.3g)", th), fmt.Sprintf("high risk (≥ %.3g)", th)}
}

func tertiles(scores []float64) ([]int, []string) {
	s := append([]float64(nil), scores...)
	sort.Float64s(s)
	q1, q2 := quantile7(s, 1.0/3), quantile7(s, 2.0/3)
	g := make([]int, len(scores))
	for i, v := range scores {
		switch {
		case v > q2:
			g[i] = 2
		case v > q1:
			g[i] = 1
		}
	}
	return g, []string{fmt.Sprintf("low (≤ %.3g)", q1), fmt.Sprintf("middle (%.3g, %.3g]", q1, q2), fmt.Sprintf("high (> %.3g)", q2)}
}

// dropEmpty removes groups without cases and renumbers the rest.
func dropEmpty(group []int, names []string) ([]int, []string) {
	count := make([]int, len(names))
	for _, g := range group {
		count[g]++
	}
	newIdx := make([]int, len(names))
	var kept []string
	for g, n := range count {
		newIdx[g] = len(kept)
		if n > 0 {
			kept = append(kept, names[g])
		}
	}
	out := make([]int, len(group))
	for i, g := range group {
		out[i] = newIdx[g]
	}
	return out, kept
}

// quantile7 is the type-7 quantile of sorted x (Hyndman and Fan 1996).
func quantile7(s []float64, p float64) float64 {
	h := (float64(len(s)) - 1) * p
	lo := math.Floor(h)
	if int(lo)+1 >= len(s) {
		return s[len(s)-1]
	}
	return s[int(lo)] + (h-lo)*(s[int(lo)+1]-s[int(lo)])
}

func median(x []float64) float64 {
	s := append([]float64(nil), x...)
	sort.Float64s(s)
	return quantile7(s, 0.5)
}

// medianKM is the first time the curve falls to 0.5 or below (survfit's
// median), NaN when it never does.
func medianKM(steps []KMStep) float64 {
	for _, st := range steps {
		if st.Surv <= 0.5 {
			return st.Time
		}
	}
	return math.NaN()
}

// bootstrap resamples cases with replacement and recomputes the
// time-dependent AUCs and the C indices; percentile intervals.
func (s *SurvivalSummary) bootstrap(t *Table, tau float64, replicates int, seed uint64) {
	rng := rand.New(rand.NewPCG(seed, 0x6d6964736167))
	n := len(t.Times)
	aucs := make([][]float64, len(s.horizons))
	var harrell, uno []float64
	risk, tm := make([]float64, n), make([]float64, n)
	ev := make([]bool, n)
	for range replicates {
		for i := range n {
			k := rng.IntN(n)
			risk[i], tm[i], ev[i] = t.Scores[k], t.Times[k], t.Events[k]
		}
		for h, x := range s.horizons {
			if a, err := TimeDependentAUC(risk, tm, ev, x); err == nil {
				aucs[h] = append(aucs[h], a.AUC)
			}
		}
		if c := HarrellC(risk, tm, ev, math.Inf(1)); !math.IsNaN(c.C) {
			harrell = append(harrell, c.C)
		}
		if c := UnoC(risk, tm, ev, tau); !math.IsNaN(c.C) {
			uno = append(uno, c.C)
		}
	}
	for h := range s.TimeAUC {
		if len(aucs[h]) > 0 {
			ci := percentileCI(aucs[h])
			s.TimeAUC[h].CI95 = &ci
		}
	}
	b := &SurvBootstrap{Replicates: replicates, Seed: seed,
		Method: "case-resampling bootstrap (Efron and Tibshirani 1993), censoring weights refitted in each replicate; percentile intervals; replicates where an index is undefined are left out"}
	if len(harrell) > 0 {
		b.Harrell = percentileCI(harrell)
	}
	if len(uno) > 0 {
		b.Uno = percentileCI(uno)
	}
	s.Bootstrap = b
}
