package evaluate

import (
	"fmt"
	"math"
	"sort"
	"strings"
)

// Flow counts a table's rows before any is left out. For a midsag batch
// table (one with a status column) it also counts the studies that were
// not scored, by status and reason code.
type Flow struct {
	Batch   bool           `json:"batch_table"`
	Rows    int            `json:"rows"`
	Status  map[string]int `json:"status"`
	Reasons map[string]int `json:"not_scored"` // "rejected: reason" → studies
}

// FlowStep is one box of the flow of studies through the evaluation, in
// the order of the STARD 2015 flow diagram (Bossuyt et al. 2015, BMJ
// 351:h5527, item 19): studies found, index test not done (by reason),
// index test done, reference standard missing, analysed, and the analysed
// cases by reference standard and index test result.
type FlowStep struct {
	Step   string `json:"step"`
	N      int    `json:"n"`
	Detail string `json:"detail,omitempty"`
}

// flowSteps builds the flow of s from the table's counts.
func flowSteps(t *Table, s *Summary) []FlowStep {
	f := t.Flow
	steps := []FlowStep{{Step: "studies in the table", N: f.Rows}}
	if f.Batch {
		notScored := 0
		for _, k := range sortedKeys(f.Reasons) {
			notScored += f.Reasons[k]
		}
		steps = append(steps,
			FlowStep{Step: "not scored by the model (index test not done)", N: notScored, Detail: countsText(f.Reasons)},
			FlowStep{Step: "scored by the model", N: f.Status[scored]})
	}
	var noRef, otherEx []string
	nNoRef, nOther := 0, 0
	for _, k := range sortedKeys(t.Excluded) {
		v := t.Excluded[k]
		if k == "no_label" || k == "empty_label" || k == "empty_time" || k == "empty_event" {
			noRef, nNoRef = append(noRef, fmt.Sprintf("%s %d", k, v)), nNoRef+v
		} else {
			otherEx, nOther = append(otherEx, fmt.Sprintf("%s %d", k, v)), nOther+v
		}
	}
	steps = append(steps,
		FlowStep{Step: "excluded: no reference standard (label or follow-up)", N: nNoRef, Detail: strings.Join(noRef, ", ")},
		FlowStep{Step: "excluded: other empty cells", N: nOther, Detail: strings.Join(otherEx, ", ")},
		FlowStep{Step: "analysed", N: s.N})
	if s.ROC != nil {
		c := s.OperatingPoint.Confusion
		steps = append(steps,
			FlowStep{Step: "reference standard positive (" + s.PositiveLabel + ")", N: s.NPositive,
				Detail: fmt.Sprintf("index test positive %d, negative %d", c.TP, c.FN)},
			FlowStep{Step: "reference standard negative (" + s.NegativeLabel + ")", N: s.N - s.NPositive,
				Detail: fmt.Sprintf("index test positive %d, negative %d", c.FP, c.TN)})
	}
	if sv := s.Survival; sv != nil {
		steps = append(steps, FlowStep{Step: "with the event during follow-up", N: sv.Events, Detail: fmt.Sprintf("censored %d", sv.Censored)})
	}
	return steps
}

func countsText(m map[string]int) string {
	var parts []string
	for _, k := range sortedKeys(m) {
		parts = append(parts, fmt.Sprintf("%s %d", k, m[k]))
	}
	return strings.Join(parts, ", ")
}

func sortedKeys(m map[string]int) []string {
	keys := make([]string, 0, len(m))
	for k := range m {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	return keys
}

// Subgroup is the evaluation restricted to the cases with one value of a
// column. The AUC is absent when the subgroup holds one class only;
// sensitivity and specificity are at the whole cohort's threshold.
type Subgroup struct {
	Column      string      `json:"column"`
	Value       string      `json:"value"`
	N           int         `json:"n"`
	NPositive   int         `json:"n_positive"`
	AUC         *AUCSummary `json:"auc,omitempty"`
	Sensitivity *Proportion `json:"sensitivity,omitempty"`
	Specificity *Proportion `json:"specificity,omitempty"`
	HarrellC    *float64    `json:"harrell_c,omitempty"`
	Events      int         `json:"events,omitempty"`
}

// subgroups splits the cases by each subgroup column's values.
func subgroups(t *Table, s *Summary) []Subgroup {
	var out []Subgroup
	cols := make([]string, 0, len(t.Groups))
	for c := range t.Groups {
		cols = append(cols, c)
	}
	sort.Strings(cols)
	for _, col := range cols {
		vals := t.Groups[col]
		byValue := map[string][]int{}
		for i, v := range vals {
			byValue[v] = append(byValue[v], i)
		}
		names := make([]string, 0, len(byValue))
		for v := range byValue {
			names = append(names, v)
		}
		sort.Strings(names)
		for _, v := range names {
			out = append(out, subgroup(t, s, col, v, byValue[v]))
		}
	}
	return out
}

func subgroup(t *Table, s *Summary, col, value string, idx []int) Subgroup {
	g := Subgroup{Column: col, Value: value, N: len(idx)}
	if value == "" {
		g.Value = "(empty)"
	}
	if s.ROC != nil {
		scores, labels := make([]float64, len(idx)), make([]bool, len(idx))
		for k, i := range idx {
			scores[k], labels[k] = t.Scores[i], t.Labels[i]
			if labels[k] {
				g.NPositive++
			}
		}
		if a, err := DeLong(scores, labels); err == nil {
			as := aucSummary(a)
			g.AUC = &as
		}
		p := performance(Classify(scores, labels, s.OperatingPoint.Threshold))
		g.Sensitivity, g.Specificity = &p.Sensitivity, &p.Specificity
	}
	if t.Times != nil {
		risk, tm, ev := make([]float64, len(idx)), make([]float64, len(idx)), make([]bool, len(idx))
		for k, i := range idx {
			risk[k], tm[k], ev[k] = t.Scores[i], t.Times[i], t.Events[i]
			if ev[k] {
				g.Events++
			}
		}
		if c := HarrellC(risk, tm, ev, math.Inf(1)); !math.IsNaN(c.C) {
			g.HarrellC = &c.C
		}
	}
	return g
}
