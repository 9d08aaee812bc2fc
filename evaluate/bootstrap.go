package evaluate

import (
	"fmt"
	"math"
	"math/rand/v2"
	"sort"
)

// bandGrid is the number of FPR steps of the bootstrap ROC band.
const bandGrid = 100

// Bootstrap draws replicates stratified bootstrap samples: positives and
// negatives are resampled separately with replacement, so every replicate
// keeps the observed prevalence (Carpenter and Bithell 2000 on bootstrap
// intervals; stratification as in pROC's default). It returns percentile
// 95% intervals (2.5th and 97.5th, R's type-7 quantile) of the AUC and of
// sensitivity and specificity at the fixed threshold (the threshold is not
// re-chosen per replicate), and a pointwise band of the TPR at FPR
// 0, 0.01, ... 1. The same seed gives the same figures.
func Bootstrap(scores []float64, labels []bool, threshold float64, replicates int, seed uint64) (BootstrapSummary, ROCBand) {
	pos, neg := split(scores, labels)
	rng := rand.New(rand.NewPCG(seed, 0x6d6964736167)) // second word: "midsag"
	aucs := make([]float64, replicates)
	sens := make([]float64, replicates)
	spec := make([]float64, replicates)
	tprAt := make([][]float64, bandGrid+1)
	bp := make([]float64, len(pos))
	bn := make([]float64, len(neg))
	for r := range replicates {
		for i := range bp {
			bp[i] = pos[rng.IntN(len(pos))]
		}
		for i := range bn {
			bn[i] = neg[rng.IntN(len(neg))]
		}
		v10, _ := placements(bp, bn)
		aucs[r] = mean(v10)
		sens[r] = fracAtLeast(bp, threshold)
		spec[r] = 1 - fracAtLeast(bn, threshold)
		curve := stepROC(bp, bn)
		for g := range tprAt {
			tprAt[g] = append(tprAt[g], curve(float64(g)/bandGrid))
		}
	}
	b := BootstrapSummary{
		Replicates: replicates, Seed: seed,
		Method:      "stratified bootstrap (positives and negatives resampled separately), percentile intervals",
		AUC:         percentileCI(aucs),
		Sensitivity: percentileCI(sens),
		Specificity: percentileCI(spec),
	}
	band := ROCBand{Method: fmt.Sprintf("pointwise 95%% percentile band of the TPR at each FPR over %d stratified bootstrap replicates (not simultaneous)", replicates)}
	for g, v := range tprAt {
		ci := percentileCI(v)
		band.FPR = append(band.FPR, float64(g)/bandGrid)
		band.Lo = append(band.Lo, ci[0])
		band.Hi = append(band.Hi, ci[1])
	}
	return b, band
}

func fracAtLeast(x []float64, t float64) float64 {
	k := 0
	for _, v := range x {
		if v >= t {
			k++
		}
	}
	return float64(k) / float64(len(x))
}

// stepROC returns the function FPR → highest TPR reached at that FPR or
// below, the ROC curve read as a step function.
func stepROC(pos, neg []float64) func(float64) float64 {
	scores := append(append([]float64(nil), pos...), neg...)
	labels := make([]bool, len(scores))
	for i := range pos {
		labels[i] = true
	}
	pts, _ := ROC(scores, labels) // both classes present by construction
	return func(fpr float64) float64 {
		best := 0.0
		for _, p := range pts {
			if p.FPR <= fpr+1e-12 {
				best = math.Max(best, p.TPR)
			}
		}
		return best
	}
}

// percentileCI returns the 2.5th and 97.5th percentiles of x by linear
// interpolation between order statistics (Hyndman and Fan 1996, type 7).
func percentileCI(x []float64) Interval {
	s := append([]float64(nil), x...)
	sort.Float64s(s)
	return Interval{quantile7(s, 0.025), quantile7(s, 0.975)}
}
