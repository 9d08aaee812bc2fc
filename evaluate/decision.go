package evaluate

// NetBenefitPoint is one threshold of a decision curve.
type NetBenefitPoint struct {
	Threshold float64 `json:"threshold"`
	Model     float64 `json:"model"`
	TreatAll  float64 `json:"treat_all"`
	TreatNone float64 `json:"treat_none"`
}

// NetBenefit returns the decision curve (Vickers and Elkin 2006) at
// threshold probabilities 0.01, 0.02, ... 0.99: treating the cases whose
// probability is at least t has net benefit TP/n − FP/n · t/(1−t); treating
// everyone has prevalence − (1 − prevalence) · t/(1−t); treating no one has 0.
func NetBenefit(probs []float64, labels []bool) []NetBenefitPoint {
	n := float64(len(probs))
	npos := 0.0
	for _, l := range labels {
		npos += b2f(l)
	}
	prev := npos / n
	pts := make([]NetBenefitPoint, 0, 99)
	for k := 1; k <= 99; k++ {
		t := float64(k) / 100
		c := Classify(probs, labels, t)
		w := t / (1 - t)
		pts = append(pts, NetBenefitPoint{
			Threshold: t,
			Model:     float64(c.TP)/n - float64(c.FP)/n*w,
			TreatAll:  prev - (1-prev)*w,
		})
	}
	return pts
}
