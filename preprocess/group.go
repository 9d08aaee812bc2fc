package preprocess

import (
	"sort"

	"github.com/midsag/midsag"
)

// Group sorts instances into studies by Study Instance UID and each study
// into series by Series Instance UID, from their headers alone. Duplicate
// SOP Instance UIDs keep their first occurrence. Studies and series are
// ordered by UID and series number so the result does not depend on file
// order.
func Group(instances []*midsag.Instance) []*midsag.Study {
	studies := map[string]*midsag.Study{}
	series := map[string]*midsag.Series{}
	seen := map[string]bool{}
	for _, in := range instances {
		if seen[in.SOPInstanceUID] {
			continue
		}
		seen[in.SOPInstanceUID] = true
		st := studies[in.StudyInstanceUID]
		if st == nil {
			st = &midsag.Study{StudyInstanceUID: in.StudyInstanceUID}
			studies[in.StudyInstanceUID] = st
		}
		key := in.StudyInstanceUID + "\x00" + in.SeriesInstanceUID
		se := series[key]
		if se == nil {
			se = &midsag.Series{SeriesInstanceUID: in.SeriesInstanceUID, SeriesNumber: in.SeriesNumber, Description: in.SeriesDescription}
			series[key] = se
			st.Series = append(st.Series, se)
		}
		se.Instances = append(se.Instances, in)
	}
	out := make([]*midsag.Study, 0, len(studies))
	for _, st := range studies {
		sort.Slice(st.Series, func(i, j int) bool {
			a, b := st.Series[i], st.Series[j]
			if a.SeriesNumber != b.SeriesNumber {
				return a.SeriesNumber < b.SeriesNumber
			}
			return a.SeriesInstanceUID < b.SeriesInstanceUID
		})
		for _, se := range st.Series {
			sort.Slice(se.Instances, func(i, j int) bool {
				return se.Instances[i].SOPInstanceUID < se.Instances[j].SOPInstanceUID
			})
		}
		out = append(out, st)
	}
	sort.Slice(out, func(i, j int) bool { return out[i].StudyInstanceUID < out[j].StudyInstanceUID })
	return out
}
