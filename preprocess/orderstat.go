package preprocess

import (
	"math/bits"
	"slices"
)

// kth returns the k-th smallest value of v (0-based), reordering v: the
// value sorting v would put at index k, found in linear expected time by
// quickselect (Hoare's FIND, Communications of the ACM 4(7), 1961) with a
// median-of-three pivot. After 2·log2(n) rounds without convergence it
// sorts what is left, so the worst case stays O(n log n). v holds no NaN.
func kth(v []float32, k int) float32 {
	lo, hi := 0, len(v)-1
	for budget := 2 * bits.Len(uint(len(v))); lo < hi; budget-- {
		if budget == 0 {
			slices.Sort(v[lo : hi+1])
			return v[k]
		}
		p := pivot(v, lo, hi)
		// Three-way partition: < p | == p | > p, so runs of equal values
		// (a flat background) end the search at once.
		lt, i, gt := lo, lo, hi
		for i <= gt {
			switch x := v[i]; {
			case x < p:
				v[lt], v[i] = v[i], v[lt]
				lt++
				i++
			case x > p:
				v[i], v[gt] = v[gt], v[i]
				gt--
			default:
				i++
			}
		}
		switch {
		case k < lt:
			hi = lt - 1
		case k > gt:
			lo = gt + 1
		default:
			return p
		}
	}
	return v[k]
}

// pivot is the median of v[lo], v[mid] and v[hi].
func pivot(v []float32, lo, hi int) float32 {
	a, b, c := v[lo], v[lo+(hi-lo)/2], v[hi]
	if a > b {
		a, b = b, a
	}
	if b > c {
		b = c
	}
	return max(a, b)
}

// kthPair returns the i-th and j-th smallest values of v, i <= j,
// reordering v. After the first selection every value above index i is
// at least the i-th, so the second searches only there.
func kthPair(v []float32, i, j int) (float32, float32) {
	a := kth(v, i)
	if j == i {
		return a, a
	}
	return a, kth(v[i+1:], j-i-1)
}
