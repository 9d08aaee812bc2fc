package preprocess

import (
	"math"

	"github.com/midsag/midsag"
)

// Slice-picking parameters.
const (
	// symmetryReach is how many slices either side of a candidate centre
	// are compared for left-right mirror symmetry.
	symmetryReach = 3
	// priorSigmaSlices is the width of the weak prior towards the slab's
	// geometric centre, in slices: archived slabs are often one to three
	// slices off the patient's midline, so the prior only breaks ties.
	priorSigmaSlices = 4.0
	// thumbSize is the longer side, in pixels, of the thumbnails that the
	// symmetry term compares; averaging down suppresses noise.
	thumbSize = 96
)

// Slices is a series sorted along its slice normal with its decoded images
// and the midline pick.
type Slices struct {
	Instances []*midsag.Instance
	Images    []*midsag.Image
	// Positions are the positions along Normal in mm (PS3.3 C.7.6.2.1.1).
	Positions []float64
	Normal    [3]float64
	SpacingMM float64
	// Scores are the per-slice midline scores, in Instances order.
	Scores []midsag.SliceScore
	// Center is the index of the slice nearest the midsagittal plane;
	// CenterEstimate is the sub-slice estimate it was rounded from.
	Center         int
	CenterEstimate float64
}

// PickSlices decodes the sorted slices and scores each one's closeness to
// the patient's midsagittal plane. The score combines image content, the
// left-right mirror symmetry of the slices either side (the neck is close
// to symmetric about its midsagittal plane, so slices at equal distances
// either side look alike), with a weak prior towards the slab's geometric
// centre. The slab is never assumed to be centred on the patient.
func PickSlices(s *Slices) error {
	if len(s.Images) != len(s.Instances) {
		s.Images = make([]*midsag.Image, len(s.Instances))
		for i, in := range s.Instances {
			img, err := Decode(in)
			if err != nil {
				return err
			}
			s.Images[i] = img
		}
	}
	n := len(s.Instances)
	thumbs := make([][]float32, n)
	for i, img := range s.Images {
		thumbs[i] = thumbnail(img, thumbSize)
	}
	scaleThumbs(thumbs)
	// mirror[k] is the symmetry cost at candidate centre k/2, for k in
	// 0..2(n-1): the mean, over pairs of slices at equal distance either
	// side, of their squared difference relative to the typical squared
	// difference of slices that far apart anywhere in the series.
	base := map[int]float64{}
	for sep := 1; sep <= 2*symmetryReach && sep < n; sep++ {
		var sum float64
		for i := 0; i+sep < n; i++ {
			sum += msd(thumbs[i], thumbs[i+sep])
		}
		base[sep] = sum / float64(n-sep)
	}
	cost := make([]float64, 2*n-1)
	pairs := make([]int, 2*n-1)
	for k := range cost {
		var sum float64
		for d2 := 1; d2 <= 2*symmetryReach; d2++ {
			if (k+d2)%2 != 0 {
				continue
			}
			a, b := (k-d2)/2, (k+d2)/2
			if a < 0 || b >= n || base[b-a] == 0 {
				continue
			}
			sum += msd(thumbs[a], thumbs[b]) / base[b-a]
			pairs[k]++
		}
		if pairs[k] > 0 {
			cost[k] = sum / float64(pairs[k])
		}
	}
	mid := float64(n-1) / 2
	obj := make([]float64, 2*n-1)
	for k := range obj {
		c := float64(k) / 2
		prior := -0.5 * math.Pow((c-mid)/priorSigmaSlices, 2)
		sym := 0.0
		if pairs[k] >= 2 {
			sym = 1 - cost[k]
		} else {
			// Too close to the slab's edge to judge symmetry.
			sym = -1
		}
		obj[k] = sym + 0.1*prior
	}
	best := 0
	for k := range obj {
		if obj[k] > obj[best] {
			best = k
		}
	}
	est := float64(best) / 2
	if best > 0 && best < len(obj)-1 {
		// Parabola through the best half-step and its neighbours.
		l, c, r := obj[best-1], obj[best], obj[best+1]
		if den := l - 2*c + r; den < 0 {
			est += 0.5 * 0.5 * (l - r) / den
		}
	}
	s.CenterEstimate = est
	s.Center = int(math.Round(est))
	if s.Center < 0 {
		s.Center = 0
	}
	if s.Center > n-1 {
		s.Center = n - 1
	}
	s.Scores = make([]midsag.SliceScore, n)
	for i, in := range s.Instances {
		k := 2 * i
		prior := math.Exp(-0.5 * math.Pow((float64(i)-mid)/priorSigmaSlices, 2))
		sym := 0.0
		if pairs[k] >= 2 {
			sym = 1 - cost[k]
		}
		s.Scores[i] = midsag.SliceScore{
			SOPInstanceUID: in.SOPInstanceUID,
			InstanceNumber: in.InstanceNumber,
			PositionMM:     round2(s.Positions[i]),
			MidlineScore:   round4(math.Exp(-0.5 * math.Pow(float64(i)-est, 2))),
			Parts: map[string]float64{
				"symmetry":        round4(sym),
				"symmetry_pairs":  float64(pairs[k]),
				"center_prior":    round4(prior),
				"distance_slices": round2(float64(i) - est),
			},
		}
	}
	return nil
}

// thumbnail box-averages img so its longer side is at most size pixels.
func thumbnail(img *midsag.Image, size int) []float32 {
	f := (max(img.Rows, img.Columns) + size - 1) / size
	if f < 1 {
		f = 1
	}
	h, w := img.Rows/f, img.Columns/f
	out := make([]float32, h*w)
	inv := 1 / float32(f*f)
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			var sum float32
			for dy := 0; dy < f; dy++ {
				row := img.Pix[(y*f+dy)*img.Columns+x*f:]
				for dx := 0; dx < f; dx++ {
					sum += row[dx]
				}
			}
			out[y*w+x] = sum * inv
		}
	}
	return out
}

// scaleThumbs divides every thumbnail by the series' mean intensity so
// squared differences are comparable between series.
func scaleThumbs(t [][]float32) {
	var sum float64
	var cnt int
	for _, th := range t {
		for _, v := range th {
			sum += float64(v)
		}
		cnt += len(th)
	}
	if cnt == 0 || sum == 0 {
		return
	}
	inv := float32(float64(cnt) / sum)
	for _, th := range t {
		for i := range th {
			th[i] *= inv
		}
	}
}

func msd(a, b []float32) float64 {
	var s float64
	for i := range a {
		d := float64(a[i] - b[i])
		s += d * d
	}
	return s / float64(len(a))
}

func round2(v float64) float64 { return math.Round(v*100) / 100 }
func round4(v float64) float64 { return math.Round(v*1e4) / 1e4 }
