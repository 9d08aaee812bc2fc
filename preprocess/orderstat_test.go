package preprocess

import (
	"math/rand/v2"
	"slices"
	"strconv"
	"testing"
)

// TestKthMatchesSort checks the selection against its definition: the
// value a full sort puts at index k, on noise, on images' typical runs of
// equal values, on sorted and reversed input and on a single value.
func TestKthMatchesSort(t *testing.T) {
	r := rand.New(rand.NewPCG(1, 2))
	inputs := map[string][]float32{"one": {3}}
	for _, n := range []int{2, 3, 10, 1000, 65537} {
		noise, flat, sorted := make([]float32, n), make([]float32, n), make([]float32, n)
		for i := range noise {
			noise[i] = float32(r.NormFloat64())
			flat[i] = float32(r.IntN(4)) // mostly ties
			sorted[i] = float32(i)
		}
		rev := slices.Clone(sorted)
		slices.Reverse(rev)
		inputs["noise"+strconv.Itoa(n)], inputs["flat"+strconv.Itoa(n)], inputs["sorted"+strconv.Itoa(n)], inputs["reversed"+strconv.Itoa(n)] = noise, flat, sorted, rev
	}
	for name, in := range inputs {
		want := slices.Clone(in)
		slices.Sort(want)
		for _, k := range []int{0, len(in) / 100, len(in) / 2, len(in) * 99 / 100, len(in) - 1} {
			if got := kth(slices.Clone(in), k); got != want[k] {
				t.Errorf("%s: kth(%d) = %v, sort gives %v", name, k, got, want[k])
			}
		}
		i, j := len(in)/100, len(in)*99/100
		if a, b := kthPair(slices.Clone(in), i, j); a != want[i] || b != want[j] {
			t.Errorf("%s: kthPair(%d, %d) = %v, %v, sort gives %v, %v", name, i, j, a, b, want[i], want[j])
		}
	}
}

// stackValues is the pixel count of a 3 x 512 x 512 stack, the size
// percentiles are taken over for a ResNet-50 input at 512.
func stackValues() []float32 {
	r := rand.New(rand.NewPCG(3, 4))
	v := make([]float32, 3*512*512)
	for i := range v {
		v[i] = float32(r.IntN(4096)) * 0.37
	}
	return v
}

// BenchmarkPercentilePairSortBaseline takes the 1st and 99th percentiles
// the way Stack did before selection: a full sort (bench/study.sh prints
// BenchmarkPercentilePair against it).
func BenchmarkPercentilePairSortBaseline(b *testing.B) {
	v, w := stackValues(), make([]float32, 3*512*512)
	for b.Loop() {
		copy(w, v)
		slices.Sort(w)
		_, _ = w[len(w)/100], w[len(w)*99/100]
	}
}

// BenchmarkPercentilePair takes them by selection (kthPair).
func BenchmarkPercentilePair(b *testing.B) {
	v, w := stackValues(), make([]float32, 3*512*512)
	for b.Loop() {
		copy(w, v)
		_, _ = kthPair(w, len(w)/100, len(w)*99/100)
	}
}
