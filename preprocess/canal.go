package preprocess

import (
	"math"
	"sort"

	"github.com/midsag/midsag"
)

// Canal-column cue parameters. On a T2-weighted sagittal slice through the
// spinal canal, bright CSF lies in front of and behind the darker cord, so
// a profile along the anterior-posterior axis reads bright, dark, bright;
// on the midsagittal slice that pattern runs without a break from the
// foramen magnum to the thoracic inlet. Slices lateral to the canal (beyond
// the cord's half-width of about 6 to 7 mm, from memory: adult cervical
// cord transverse diameter 12 to 14 mm) lose it.
const (
	// canalGridMM is the measurement grid: slices are resampled to this
	// pixel size so every threshold below is in millimetres.
	canalGridMM = 1.0
	// canalMinSepMM and canalMaxSepMM bound the distance between the CSF
	// maxima either side of the cord: the adult cervical cord is 6 to 9 mm
	// deep and the canal 12 to 17 mm (from memory), and partial volume
	// moves the maxima to the middle of each CSF layer.
	canalMinSepMM = 4.0
	canalMaxSepMM = 14.0
	// canalFlank is the least CSF brightness, as a fraction of the series'
	// bright reference (its 99th percentile), and canalDip the least fall
	// from the darker flank to the cord, as a fraction of that flank
	// (common practice for "clearly darker"; tuned on package phantom only).
	canalFlank = 0.75
	canalDip   = 0.25
	// canalCordFloor is the least cord to CSF brightness ratio: on T2 the
	// cord is intermediate grey, brighter than muscle, whose T2 is about
	// half the cord's (from memory: muscle 35 to 45 ms, cord 70 to 80 ms
	// at 1.5 T), so a dark band between two bright ones at under a third
	// of their brightness is muscle between fat planes, not cord.
	canalCordFloor = 0.33
	// canalGapMM is the longest stretch a column may be broken for and
	// still count as one column: a compressed level effaces the CSF over a
	// disc height or two (a cervical disc is 5 to 6 mm high, from memory).
	canalGapMM = 14.0
	// canalDriftMM is how far the column's centre may move along the
	// anterior-posterior axis per millimetre of height (lordosis bends the
	// canal by well under 1 mm per mm, from memory).
	canalDriftMM = 1.0
	// canalBodyLevel and canalInsetMM reject bright-dark-bright crossings
	// at the body's surface: skin over subcutaneous fat shows the pattern
	// too, along the whole neck. The outline is the outermost pixel of a
	// row at canalBodyLevel of the bright reference or more: any tissue
	// rather than air (a low level, so that on fat-suppressed images,
	// where fat is dark, muscle still counts as body; 0.1 and 0.3 gave the
	// same picks on both phantom families). The canal lies deep in the
	// neck, behind it the posterior elements and the neck muscles, in
	// front the vertebral bodies and the pharynx, each several
	// centimetres in adults (from memory), so canalInsetMM is a safe
	// least distance from either flank to the outline.
	canalBodyLevel = 0.1
	canalInsetMM   = 15.0
	// CanalMinColumnMM is the shortest column that counts as the canal:
	// a cervical sagittal field of view holds 100 mm or more of cord
	// (common practice), and chance bright-dark-bright runs in muscle and
	// fat are a few millimetres long.
	CanalMinColumnMM = 40.0
	// CanalMinColumnFraction is the shortest column that counts as the
	// canal as a fraction of the field of view's superior-inferior
	// height: a cervical sagittal series is planned on the cervical
	// spine, so the cord runs through most of the image (common
	// practice).
	CanalMinColumnFraction = 0.45
)

// canalCue is what the canal-column measurement found in one slice.
type canalCue struct {
	// ColumnMM is the height covered by the longest bright-dark-bright
	// column (rows that show the pattern, in mm); DepthMM is the median
	// distance between its CSF maxima.
	ColumnMM float64
	DepthMM  float64
	// HeightMM is the slice's superior-inferior extent; TopMM and
	// BottomMM bound the column from above and below.
	HeightMM        float64
	TopMM, BottomMM float64
	// rows marks the grid rows (canalGridMM each, from the top) that the
	// column covers: the per-level cue of the obliquity measurement.
	rows []bool
}

// resampleGrid turns a canonical image (rows superior to inferior, columns
// anterior to posterior) with pixel spacing sp into a grid of canalGridMM
// pixels by box-averaging, which also averages noise down.
func resampleGrid(img *midsag.Image, sp [2]float64) (pix []float32, h, w int) {
	h = int(float64(img.Rows) * sp[0] / canalGridMM)
	w = int(float64(img.Columns) * sp[1] / canalGridMM)
	if h < 1 || w < 1 {
		return nil, 0, 0
	}
	pix = make([]float32, h*w)
	for y := 0; y < h; y++ {
		y0 := int(float64(y) * canalGridMM / sp[0])
		y1 := max(y0+1, int(float64(y+1)*canalGridMM/sp[0]))
		y1 = min(y1, img.Rows)
		for x := 0; x < w; x++ {
			x0 := int(float64(x) * canalGridMM / sp[1])
			x1 := max(x0+1, int(float64(x+1)*canalGridMM/sp[1]))
			x1 = min(x1, img.Columns)
			var sum float32
			n := 0
			for yy := y0; yy < y1; yy++ {
				row := img.Pix[yy*img.Columns:]
				for xx := x0; xx < x1; xx++ {
					sum += row[xx]
					n++
				}
			}
			if n > 0 {
				pix[y*w+x] = sum / float32(n)
			}
		}
	}
	return pix, h, w
}

// brightReference is the 99th percentile of the grids' pixels: the level
// of CSF on a T2-weighted image (common practice: CSF is the brightest
// tissue of a T2-weighted spine).
func brightReference(grids [][]float32) float64 {
	var all []float32
	for _, g := range grids {
		for i := 0; i < len(g); i += 3 {
			all = append(all, g[i])
		}
	}
	if len(all) == 0 {
		return 0
	}
	return float64(kth(all, int(0.99*float64(len(all)-1))))
}

// triplet is one bright-dark-bright crossing of a row.
type triplet struct {
	mid, sep float64
}

// measureCanal finds the longest continuous CSF-cord-CSF column in a grid
// of h x w millimetre pixels.
func measureCanal(pix []float32, h, w int, bright float64) canalCue {
	cue := canalCue{HeightMM: float64(h) * canalGridMM}
	if h < 3 || w < 3 || bright <= 0 {
		return cue
	}
	rows := make([][]triplet, h)
	sm := smoothColumns(pix, h, w)
	for y := range rows {
		rows[y] = rowTriplets(sm[y*w:(y+1)*w], bright)
	}
	n, top, bottom, seps, covered := longestColumn(rows)
	if n > 0 {
		cue.rows = make([]bool, h)
		for _, y := range covered {
			cue.rows[y] = true
		}
		cue.ColumnMM, cue.DepthMM = float64(n)*canalGridMM, median(seps)
		cue.TopMM, cue.BottomMM = float64(top)*canalGridMM, float64(bottom+1)*canalGridMM
	}
	return cue
}

// smoothColumns averages every pixel with the rows above and below it:
// the column runs superior-inferior, noise does not.
func smoothColumns(pix []float32, h, w int) []float32 {
	sm := make([]float32, h*w)
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			var s float32
			n := 0
			for dy := -1; dy <= 1; dy++ {
				if yy := y + dy; yy >= 0 && yy < h {
					s += pix[yy*w+x]
					n++
				}
			}
			sm[y*w+x] = s / float32(n)
		}
	}
	return sm
}

// rowTriplets returns the bright-dark-bright crossings of one row p
// (anterior to posterior) that could be CSF either side of the cord.
func rowTriplets(p []float32, bright float64) []triplet {
	w := len(p)
	reach := int(canalMaxSepMM / canalGridMM)
	flank := float32(canalFlank * bright)
	// The body's outline in this row: its outermost pixels as bright as
	// fat or CSF.
	first, last := -1, -1
	for x, v := range p {
		if v >= float32(canalBodyLevel*bright) {
			if first < 0 {
				first = x
			}
			last = x
		}
	}
	inset := int(canalInsetMM / canalGridMM)
	var out []triplet
	for x := 1; x < w-1; x++ {
		if !(p[x] <= p[x-1] && p[x] < p[x+1]) {
			continue
		}
		l, li := p[x], x
		for xx := x - 1; xx >= max(0, x-reach); xx-- {
			if p[xx] > l {
				l, li = p[xx], xx
			}
		}
		r, ri := p[x], x
		for xx := x + 1; xx < min(w, x+reach); xx++ {
			if p[xx] > r {
				r, ri = p[xx], xx
			}
		}
		lo := min(l, r)
		sep := float64(ri-li) * canalGridMM
		if lo < flank || p[x] > lo*(1-canalDip) || p[x] < lo*canalCordFloor || sep < canalMinSepMM || sep > canalMaxSepMM || li-first < inset || last-ri < inset {
			continue
		}
		out = append(out, triplet{mid: float64(x) * canalGridMM, sep: sep})
	}
	return out
}

// longestColumn links crossings of successive rows into columns, each
// crossing within the drift of one at most canalGapMM above it, and
// returns the number of rows of the longest, its first and last row, its
// CSF separations and the rows it covers.
func longestColumn(rows [][]triplet) (n, top, bottom int, seps []float64, covered []int) {
	type node struct {
		count, prevY, prevI int
		triplet             triplet
	}
	gap := int(canalGapMM / canalGridMM)
	chains := make([][]node, len(rows))
	bestY, bestI, bestN := -1, -1, 0
	for y := range rows {
		chains[y] = make([]node, len(rows[y]))
		for i, t := range rows[y] {
			nd := node{count: 1, prevY: -1, prevI: -1, triplet: t}
			for dy := 1; dy <= gap+1 && y-dy >= 0; dy++ {
				for j, pt := range rows[y-dy] {
					if math.Abs(pt.mid-t.mid) > canalDriftMM*float64(dy)+1 {
						continue
					}
					if c := chains[y-dy][j].count + 1; c > nd.count {
						nd.count, nd.prevY, nd.prevI = c, y-dy, j
					}
				}
			}
			chains[y][i] = nd
			if nd.count > bestN {
				bestY, bestI, bestN = y, i, nd.count
			}
		}
	}
	top = bestY
	for y, i := bestY, bestI; y >= 0; {
		nd := chains[y][i]
		seps = append(seps, nd.triplet.sep)
		covered = append(covered, y)
		top = y
		y, i = nd.prevY, nd.prevI
	}
	return bestN, top, bestY, seps, covered
}

func median(v []float64) float64 {
	if len(v) == 0 {
		return 0
	}
	s := append([]float64(nil), v...)
	sort.Float64s(s)
	return s[len(s)/2]
}
