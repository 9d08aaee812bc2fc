package preprocess

import (
	"math"
	"slices"

	"github.com/midsag/midsag"
)

// Midline-picking parameters.
const (
	// symmetryReach is how many slices either side of a candidate centre
	// are compared for left-right mirror symmetry.
	symmetryReach = 3
	// priorSigmaMM is the width of the weak prior towards the slab's
	// geometric centre, in millimetres: technologists plan the sagittal
	// slab centred on the cord, but archived slabs are often several
	// millimetres off (common practice), so the prior only breaks ties.
	priorSigmaMM = 15.0
	// thumbSize is the longer side, in pixels, of the thumbnails that the
	// symmetry term compares; averaging down suppresses noise.
	thumbSize = 96
	// Cue weights of the combined objective and the temperature that
	// turns it into per-slice weights. They were set on package phantom,
	// then changed after a first measurement on internal/crossphantom
	// (README, "Midline"), so neither family is a clean held-out set.
	// weightLead and weightFollow weigh the leading and the other of
	// symmetry and the canal profile's centre (the midpoint of its
	// half-maximum crossings, spread by centreSigmaSlices); weightCanal
	// the canal column's own length and weightPrior the prior.
	weightLead        = 2.0
	weightFollow      = 0.5
	weightCanal       = 0.5
	weightPrior       = 0.1
	centreSigmaSlices = 0.6
	scoreTemp         = 0.1
	// StrongSymmetry is the symmetry, on two or more pairs inside the
	// canal column's half-maximum run, from which symmetry leads the pick
	// instead of the canal column's profile.
	StrongSymmetry = 0.5
	// MinConfidence is the least confidence of a pick without the flag
	// midline_uncertain. Confidence is the combined weight of the picked
	// slice and its two neighbours times the evidence: symmetry, full at
	// fullSymmetry or more, or canalEvidence for a whole canal profile.
	// On package phantom the
	// true midline slices score 0.41 to 0.98 with three pairs, and the
	// best candidates of slabs that miss the midline 0.31 or less.
	MinConfidence = 0.6
	fullSymmetry  = 0.6
	// onePairEvidence discounts symmetry that rests on a single pair of
	// slices: on package phantom one pair reaches 0.37 on slabs that miss
	// the midline.
	onePairEvidence = 0.75
	// canalEvidence is the evidence of a canal column profile that is
	// whole inside the slab, when symmetry is weaker.
	canalEvidence = 0.8
	// CanalMinRunMM is the least width, across slices, of the canal
	// column's half-maximum run for it to count as evidence: the column
	// shows on every slice through the cord, which is 12 to 14 mm wide
	// (from memory), so a run narrower than this is a chance structure or
	// the edge of the canal.
	CanalMinRunMM = 5.0
	// CanalHalfRunMM is half the usual width, across slices, of the canal
	// column's half-maximum run: the cord's transverse diameter, 10 to 13
	// mm in adults (from memory); runs whole inside the slab measured a
	// mean half-width of 5.5 to 5.8 mm on both phantom families, at every
	// slice thickness from 1 to 4 mm. It places the plane when the run is cut by
	// the slab's edge, and a plane so placed more than a slice beyond the
	// edge slice is refused as midline_not_in_slab.
	CanalHalfRunMM = 5.5
	// ambiguousMargin and ambiguousMarginMM say how close the estimate,
	// led by the canal profile or by symmetry, may come to the boundary
	// between two slices before the pick is flagged, in slices and in
	// millimetres, whichever is wider: the half-maximum centre is good to
	// about a third of a slice on thick slices and to a few tenths of a
	// millimetre on thin ones (measured on both phantom families).
	// CanalMinDensity is the least fraction of its extent that a column's
	// rows must cover for it to count towards the column length that keeps
	// a slab: the canal's CSF-cord-CSF pattern is broken only at a
	// compressed level or two (canalGapMM), while crossings of lateral
	// structures (root sleeves, facet joints) chain up through many gaps.
	// Longest columns of slabs that hold the midline covered 0.81 to 1 of
	// their extent on both phantom families, the chained ones of slabs that
	// miss it down to 0.15; 0.6 to 0.8 gave the same picks.
	CanalMinDensity   = 0.7
	ambiguousMargin   = 0.25
	ambiguousMarginMM = 0.4
)

// Midline quality flags.
const (
	// FlagMidlineUncertain: the cues are weak or disagree about the plane.
	FlagMidlineUncertain = "midline_uncertain"
	// FlagMidlineAtSlabEdge: the pick lies at the slab's edge, so the plane
	// may lie beyond it, or the model's stack needs slices the slab lacks.
	FlagMidlineAtSlabEdge = "midline_at_slab_edge"
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
	// Confidence is the combined weight of the picked slice and its
	// neighbours (0 to 1); Flags are the midline quality flags.
	Confidence float64
	Flags      []string
	// Notes say, for a person, why the pick is flagged when the flag
	// alone does not (the plane's obliquity to the slices).
	Notes []string
}

// PickSlices decodes the sorted slices and picks the one nearest the
// patient's midsagittal plane from three cues, each reported per slice:
//
//   - symmetry: the neck is close to mirror-symmetric about its
//     midsagittal plane, so slices at equal distances either side of it
//     look alike;
//   - canal: only slices through the spinal canal show the bright CSF
//     either side of the darker cord as one column along the neck, and the
//     column is longest on the midsagittal slice;
//   - prior: a weak pull, in millimetres, towards the slab's geometric
//     centre. The slab is never assumed to be centred on the patient.
//
// The centre of the canal column's profile across the slices leads, unless
// symmetry inside it is strong; symmetry counts only where the canal is.
// The pick carries a confidence and the flags midline_uncertain and
// midline_at_slab_edge when the evidence is weak, disagrees or runs to the
// slab's edge. When no slice, with its neighbours, shows a dense canal
// column long enough, the plane is not in the slab and PickSlices refuses
// with midline_not_in_slab.
func PickSlices(s *Slices) error {
	if len(s.Images) != len(s.Instances) {
		s.Images = make([]*midsag.Image, len(s.Instances))
		err := eachIndex(len(s.Instances), func(i int) error {
			img, err := Decode(s.Instances[i])
			s.Images[i] = img
			return err
		})
		if err != nil {
			return err
		}
	}
	m, err := measureMidline(s)
	if err != nil {
		return err
	}
	d := m.decide()
	s.CenterEstimate, s.Center = d.est, d.center
	s.Confidence, s.Flags, s.Notes = d.confidence, d.flags, d.notes
	s.Scores = m.scores(s, d.est, d.weights)
	if m.tiltOK {
		// The obliquity is the slab's, reported on the pick.
		s.Scores[d.center].Parts["oblique_drift_slices"] = round2(m.tilt.drift)
		s.Scores[d.center].Parts["oblique_span_mm"] = round2(m.tilt.spanMM)
	}
	return nil
}

// midlineDecision is the pick made from a slab's cues.
type midlineDecision struct {
	est        float64 // sub-slice estimate of the plane, in slices
	center     int     // the slice nearest est
	weights    []float64
	confidence float64
	flags      []string
	notes      []string
}

// decide picks the slice nearest the plane from the measured cues.
func (m *midlineCues) decide() midlineDecision {
	obj := m.objective()
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
	d := midlineDecision{est: est, center: min(max(int(math.Round(est)), 0), m.n-1)}
	d.weights = sliceWeights(obj, m.n)
	d.confidence, d.flags = m.judge(d.center, est, d.weights)
	if m.tiltOK && m.tilt.oblique() {
		// The picked slice is the nearest at about 1/drift of the
		// cord's levels.
		d.confidence = round4(d.confidence / math.Abs(m.tilt.drift))
		d.notes = append(d.notes, m.tilt.note(m.spacing))
		if !slices.Contains(d.flags, FlagMidlineUncertain) {
			d.flags = append(d.flags, FlagMidlineUncertain)
		}
	}
	return d
}

// midlineCues is what the cues measured on one slab.
type midlineCues struct {
	n             int
	positions     []float64
	spacing       float64
	cost          []float64 // mirror cost per half-step candidate
	pairs         []int     // mirror pairs behind each cost
	canal         []canalCue
	anat          []float64  // canal column length relative to the longest
	runLo, runHi  float64    // half-maximum run of anat, in slices
	lowIn, highIn bool       // whether each crossing lies inside the slab
	centre        float64    // the canal profile's estimate of the plane
	symLead       bool       // symmetry inside the run is strong and leads
	secondRun     bool       // another run of the profile reaches half its peak
	tilt          obliqueFit // the canal's per-level centres along the cord
	tiltOK        bool       // whether tilt was measured
}

// measureMidline measures the cues and refuses a slab that does not hold
// the midsagittal plane.
func measureMidline(s *Slices) (*midlineCues, error) {
	n := len(s.Instances)
	m := &midlineCues{n: n, positions: s.Positions, spacing: s.SpacingMM}
	if m.spacing <= 0 {
		m.spacing = 1
	}
	m.cost, m.pairs = mirrorCost(s.Images)
	m.canal = canalCues(s)
	return m, m.analyse()
}

// analyse derives the canal profile, its centre and whether symmetry
// leads from the measured cues, and refuses a slab that does not hold the
// midsagittal plane.
func (m *midlineCues) analyse() error {
	n := m.n
	maxCol, maxSpan, heightMM := 0.0, 0.0, 0.0
	for i, c := range m.canal {
		maxCol = max(maxCol, c.ColumnMM)
		maxSpan = max(maxSpan, m.neighbourSpan(i))
		heightMM = max(heightMM, c.HeightMM)
	}
	if need := max(CanalMinColumnMM, CanalMinColumnFraction*heightMM); maxSpan < need {
		return midsag.Rejectf(midsag.ReasonMidlineNotInSlab,
			"no slice of the %d, with its neighbours, shows the CSF-cord column of the spinal canal over %.0f mm or more (longest %.0f mm of a %.0f mm field of view): the slab does not hold the midsagittal plane",
			n, need, maxSpan, heightMM)
	}
	m.anat = make([]float64, n)
	for i, c := range m.canal {
		m.anat[i] = c.ColumnMM / maxCol
	}
	m.runLo, m.runHi, m.lowIn, m.highIn = halfMaxRun(m.anat)
	for i, a := range m.anat {
		if f := float64(i); a >= 0.5 && (f < m.runLo || f > m.runHi) {
			m.secondRun = true
		}
	}
	halfRun := CanalHalfRunMM / m.spacing
	switch {
	case m.lowIn && m.highIn:
		m.centre = (m.runLo + m.runHi) / 2
	case m.lowIn:
		// One crossing lies beyond the slab: the centre is half the
		// canal's usual run from the crossing inside it.
		m.centre = m.runLo + halfRun
	case m.highIn:
		m.centre = m.runHi - halfRun
	default:
		m.centre = float64(argmax(m.anat))
	}
	for k := range m.cost {
		c := float64(k) / 2
		if c < m.runLo || c > m.runHi {
			continue
		}
		// One pair, next to the slab's edge, must be stronger.
		if sym := 1 - m.cost[k]; (m.pairs[k] >= 2 && sym >= StrongSymmetry) || (m.pairs[k] == 1 && sym >= StrongSymmetry/onePairEvidence) {
			m.symLead = true
		}
	}
	m.tilt, m.tiltOK = m.obliquity()
	if !m.symLead && (m.centre < -1 || m.centre > float64(n)) {
		return midsag.Rejectf(midsag.ReasonMidlineNotInSlab,
			"the canal column runs to the slab's edge and its profile puts the midsagittal plane about %.0f mm beyond the edge slice: the slab does not hold the midline",
			math.Abs(min(m.centre, 0)+max(m.centre-float64(n-1), 0))*m.spacing)
	}
	return nil
}

// neighbourSpan is the canal column of slice i lengthened by the rows
// its neighbours' columns add above and below it when they meet it
// within canalGapMM: a cord that bends out of one thick slice at some
// levels shows there in the next.
func (m *midlineCues) neighbourSpan(i int) float64 {
	c := m.canal[i]
	if !c.dense() {
		return 0
	}
	top, bottom := c.TopMM, c.BottomMM
	for _, j := range []int{i - 1, i + 1} {
		if j < 0 || j >= m.n {
			continue
		}
		if o := m.canal[j]; o.dense() && o.TopMM <= c.BottomMM+canalGapMM && o.BottomMM >= c.TopMM-canalGapMM {
			top, bottom = min(top, o.TopMM), max(bottom, o.BottomMM)
		}
	}
	return c.ColumnMM + (bottom - top) - (c.BottomMM - c.TopMM)
}

// dense reports whether the column's rows cover CanalMinDensity of its
// extent or more.
func (c canalCue) dense() bool {
	return c.ColumnMM > 0 && c.ColumnMM >= CanalMinDensity*(c.BottomMM-c.TopMM)
}

// mid is the slab's geometric centre along the normal, in mm.
func (m *midlineCues) mid() float64 { return (m.positions[0] + m.positions[m.n-1]) / 2 }

// pos is the position along the normal, in mm, of fractional slice c.
func (m *midlineCues) pos(c float64) float64 {
	i := int(math.Floor(c))
	if i >= m.n-1 {
		return m.positions[m.n-1]
	}
	f := c - float64(i)
	return m.positions[i]*(1-f) + m.positions[i+1]*f
}

// anatAt is the canal cue at half-step candidate k.
func (m *midlineCues) anatAt(k int) float64 {
	if k%2 == 0 {
		return m.anat[k/2]
	}
	return (m.anat[k/2] + m.anat[k/2+1]) / 2
}

// objective scores every half-step candidate centre. The leading cue
// (symmetry when it is strong inside the canal, else the canal profile's
// centre) weighs weightLead, the other weightFollow. Symmetry counts only
// where the canal is: lateral slices of uniform soft tissue mirror each
// other too.
func (m *midlineCues) objective() []float64 {
	wSym, wCentre := weightFollow, weightLead
	if m.symLead {
		wSym, wCentre = weightLead, weightFollow/2
	}
	obj := make([]float64, 2*m.n-1)
	for k := range obj {
		c := float64(k) / 2
		sym := 0.0
		if m.pairs[k] > 0 {
			sym = (1 - m.cost[k]) * m.anatAt(k)
		}
		prior := -0.5 * math.Pow((m.pos(c)-m.mid())/priorSigmaMM, 2)
		obj[k] = wSym*sym + weightCanal*m.anatAt(k) + weightPrior*prior +
			wCentre*math.Exp(-0.5*math.Pow((c-m.centre)/centreSigmaSlices, 2))
	}
	return obj
}

// sliceWeights is a softmax of the objective over whole slices.
func sliceWeights(obj []float64, n int) []float64 {
	w := make([]float64, n)
	top := obj[0]
	for i := range w {
		top = max(top, obj[2*i])
	}
	var sum float64
	for i := range w {
		w[i] = math.Exp((obj[2*i] - top) / scoreTemp)
		sum += w[i]
	}
	for i := range w {
		w[i] /= sum
	}
	return w
}

// judge returns the pick's confidence and its midline flags.
func (m *midlineCues) judge(center int, est float64, w []float64) (float64, []string) {
	mass := 0.0
	for i := max(0, center-1); i <= min(m.n-1, center+1); i++ {
		mass += w[i]
	}
	evidence := 0.0
	if k := 2 * center; m.pairs[k] > 0 {
		evidence = min(max((1-m.cost[k])/fullSymmetry, 0), 1)
		if m.pairs[k] == 1 {
			// One pair, one slice from the edge, is weaker evidence.
			evidence *= onePairEvidence
		}
	}
	whole := m.lowIn && m.highIn
	if c := float64(center); whole && c >= m.runLo && c <= m.runHi && (m.runHi-m.runLo)*m.spacing >= CanalMinRunMM {
		// The canal column's profile is whole inside the slab and the
		// pick lies within its half-maximum run.
		evidence = max(evidence, canalEvidence)
	}
	evidence *= min(m.anat[center]/0.5, 1)
	confidence := round4(mass * evidence)
	uncertain := confidence < MinConfidence
	switch {
	case m.symLead && whole && math.Abs(m.centre-float64(center)) >= 0.5:
		// Symmetry and the canal profile point at different slices.
		uncertain = true
	case m.secondRun:
		// Two runs of the canal profile: the canal is only one of them.
		uncertain = true
	case 0.5-math.Abs(est-math.Round(est)) < max(ambiguousMargin, ambiguousMarginMM/m.spacing):
		// The cues put the plane near the boundary of two slices: either
		// could be the nearer.
		uncertain = true
	}
	var flags []string
	if center == 0 || center == m.n-1 || !whole {
		// The canal column runs to the slab's edge: the plane may lie at
		// or beyond it.
		flags = append(flags, FlagMidlineAtSlabEdge)
		uncertain = true
	}
	if uncertain {
		flags = append(flags, FlagMidlineUncertain)
	}
	return confidence, flags
}

// scores reports every cue per slice with its value.
func (m *midlineCues) scores(s *Slices, est float64, w []float64) []midsag.SliceScore {
	out := make([]midsag.SliceScore, m.n)
	for i, in := range s.Instances {
		k := 2 * i
		parts := map[string]float64{
			"canal_column_mm": round2(m.canal[i].ColumnMM),
			"canal_depth_mm":  round2(m.canal[i].DepthMM),
			"canal":           round4(m.anat[i]),
			"symmetry_pairs":  float64(m.pairs[k]),
			"center_prior":    round4(math.Exp(-0.5 * math.Pow((m.positions[i]-m.mid())/priorSigmaMM, 2))),
			"distance_mm":     round2(m.positions[i] - m.pos(est)),
			"distance_slices": round2(float64(i) - est),
		}
		if m.pairs[k] > 0 {
			parts["symmetry"] = round4(1 - m.cost[k])
		}
		out[i] = midsag.SliceScore{
			SOPInstanceUID: in.SOPInstanceUID,
			InstanceNumber: in.InstanceNumber,
			PositionMM:     round2(m.positions[i]),
			MidlineScore:   round4(w[i]),
			Parts:          parts,
		}
	}
	return out
}

func argmax(a []float64) int {
	best := 0
	for i := range a {
		if a[i] > a[best] {
			best = i
		}
	}
	return best
}

// halfMaxRun returns the half-maximum crossings of a profile that peaks
// at 1, either side of its peak, in slice units; a crossing beyond the
// slab is reported as the slab's edge with lowIn or highIn false.
func halfMaxRun(a []float64) (lo, hi float64, lowIn, highIn bool) {
	n := len(a)
	p := 0
	for i := range a {
		if a[i] > a[p] {
			p = i
		}
	}
	// The middle of a run of equal peaks.
	q := p
	for q+1 < n && a[q+1] == a[p] {
		q++
	}
	lo, hi = float64(p)-0.5, float64(q)+0.5
	for i := p; i > 0; i-- {
		if a[i-1] < 0.5 {
			lo, lowIn = float64(i-1)+(0.5-a[i-1])/(a[i]-a[i-1]), true
			break
		}
	}
	for i := q; i < n-1; i++ {
		if a[i+1] < 0.5 {
			hi, highIn = float64(i)+(a[i]-0.5)/(a[i]-a[i+1]), true
			break
		}
	}
	if !lowIn {
		lo = -0.5
	}
	if !highIn {
		hi = float64(n) - 0.5
	}
	return lo, hi, lowIn, highIn
}

// mirrorCost returns, for every candidate centre k/2 (k in 0..2(n-1)), the
// symmetry cost: the mean, over pairs of slices at equal distance either
// side, of their squared difference relative to the typical squared
// difference of slices that far apart anywhere in the series, and the
// number of pairs it rests on.
func mirrorCost(images []*midsag.Image) ([]float64, []int) {
	n := len(images)
	thumbs := make([][]float32, n)
	for i, img := range images {
		thumbs[i] = thumbnail(img, thumbSize)
	}
	scaleThumbs(thumbs)
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
	return cost, pairs
}

// canalCues measures the canal column of every slice on its canonical
// view, against one bright reference for the series.
func canalCues(s *Slices) []canalCue {
	grids := make([][]float32, len(s.Images))
	hs, ws := make([]int, len(grids)), make([]int, len(grids))
	_ = eachIndex(len(grids), func(i int) error {
		c, sp := canonical(s.Instances[i], s.Images[i])
		grids[i], hs[i], ws[i] = resampleGrid(c, sp)
		return nil
	})
	b := brightReference(grids)
	out := make([]canalCue, len(grids))
	_ = eachIndex(len(grids), func(i int) error {
		out[i] = measureCanal(grids[i], hs[i], ws[i], b)
		return nil
	})
	return out
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
