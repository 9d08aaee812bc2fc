package evaluate

import (
	"encoding/json"
	"fmt"
	"math"
	"sort"
)

// ROCPoint is one point of the empirical ROC curve: calling a case positive
// when its score is at least Threshold gives these rates.
type ROCPoint struct {
	Threshold float64 `json:"threshold"`
	FPR       float64 `json:"fpr"`
	TPR       float64 `json:"tpr"`
}

// MarshalJSON writes the threshold of the first point, +Inf, as null,
// which JSON can carry.
func (p ROCPoint) MarshalJSON() ([]byte, error) {
	var th *float64
	if !math.IsInf(p.Threshold, 0) {
		th = &p.Threshold
	}
	return json.Marshal(struct {
		Threshold *float64 `json:"threshold"`
		FPR       float64  `json:"fpr"`
		TPR       float64  `json:"tpr"`
	}{th, p.FPR, p.TPR})
}

// ROC returns the empirical ROC curve, one point per distinct score from
// the highest down, preceded by (0, 0) at threshold +Inf (the same points
// as scikit-learn's roc_curve with drop_intermediate=False).
func ROC(scores []float64, labels []bool) ([]ROCPoint, error) {
	pos, neg := split(scores, labels)
	if len(pos) == 0 || len(neg) == 0 {
		return nil, ErrOneClass
	}
	idx := order(scores)
	pts := []ROCPoint{{Threshold: math.Inf(1)}}
	tp, fp := 0, 0
	for i := 0; i < len(idx); {
		t := scores[idx[i]]
		for ; i < len(idx) && scores[idx[i]] == t; i++ {
			if labels[idx[i]] {
				tp++
			} else {
				fp++
			}
		}
		pts = append(pts, ROCPoint{Threshold: t, FPR: float64(fp) / float64(len(neg)), TPR: float64(tp) / float64(len(pos))})
	}
	return pts, nil
}

// order returns the indices of scores from the highest score down.
func order(scores []float64) []int {
	idx := make([]int, len(scores))
	for i := range idx {
		idx[i] = i
	}
	sort.SliceStable(idx, func(a, b int) bool { return scores[idx[a]] > scores[idx[b]] })
	return idx
}

// Confusion counts the cases by truth and call.
type Confusion struct {
	TP int `json:"tp"`
	FP int `json:"fp"`
	TN int `json:"tn"`
	FN int `json:"fn"`
}

// Classify returns the confusion matrix of calling a case positive when
// its score is at least threshold.
func Classify(scores []float64, labels []bool, threshold float64) Confusion {
	calls := make([]bool, len(scores))
	for i, s := range scores {
		calls[i] = s >= threshold
	}
	return Tally(calls, labels)
}

// Tally returns the confusion matrix of binary calls against labels.
func Tally(calls, labels []bool) Confusion {
	var c Confusion
	for i, call := range calls {
		switch {
		case call && labels[i]:
			c.TP++
		case call:
			c.FP++
		case labels[i]:
			c.FN++
		default:
			c.TN++
		}
	}
	return c
}

// Rule says how an operating point's threshold was chosen.
type Rule string

// Threshold rules.
const (
	RuleFixed             Rule = "fixed"              // given by the caller
	RuleYouden            Rule = "youden"             // maximises sensitivity + specificity − 1
	RuleTargetSensitivity Rule = "target_sensitivity" // highest threshold reaching a sensitivity
)

// PickThreshold returns the threshold for rule on the ROC curve pts.
// Youden's J (Youden 1950) is maximised over the curve's thresholds; among
// ties the highest threshold wins (fewer positive calls). For a target
// sensitivity the highest threshold whose sensitivity reaches target is
// taken, which gives the best specificity at that sensitivity. Both are
// chosen on the data they are then measured on, so their figures are
// optimistic.
func PickThreshold(pts []ROCPoint, rule Rule, target float64) (float64, error) {
	switch rule {
	case RuleYouden:
		best, bestJ := math.NaN(), math.Inf(-1)
		for _, p := range pts[1:] {
			if j := p.TPR - p.FPR; j > bestJ+1e-12 {
				best, bestJ = p.Threshold, j
			}
		}
		return best, nil
	case RuleTargetSensitivity:
		if !(target > 0 && target <= 1) {
			return 0, fmt.Errorf("target sensitivity %g is not in (0, 1]", target)
		}
		for _, p := range pts[1:] {
			if p.TPR >= target-1e-12 {
				return p.Threshold, nil
			}
		}
		return pts[len(pts)-1].Threshold, nil
	}
	return 0, fmt.Errorf("threshold rule %q needs a threshold from the caller", rule)
}
