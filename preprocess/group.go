package preprocess

import (
	"bytes"
	"reflect"
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

// Dedupe drops identical resends of an instance and refuses conflicting
// ones. Two instances are the same when they share SOP Instance UID and
// Frame; they are identical when every attribute midsag reads (everything
// in midsag.Instance but Source) and the pixel data bytes are equal, as
// when a modality or archive sends a study twice or a folder holds two
// copies. Then the first is kept. Otherwise the archive holds two
// different objects under one UID (PS3.3 C.12.1.1.1 makes the UID unique
// to one instance) and either could be the one the study means: refused
// as duplicate_instance naming the UID and both sources. The server's
// store already keeps one file per SOP Instance UID (a resend with other
// bytes replaces the stored one), so this bites on folders and archives.
func Dedupe(instances []*midsag.Instance) ([]*midsag.Instance, error) {
	type key struct {
		uid   string
		frame int
	}
	first := map[key]*midsag.Instance{}
	out := make([]*midsag.Instance, 0, len(instances))
	for _, in := range instances {
		k := key{in.SOPInstanceUID, in.Frame}
		prev, ok := first[k]
		if !ok {
			first[k] = in
			out = append(out, in)
			continue
		}
		if diff := instanceDiff(prev, in); diff != "" {
			return nil, midsag.Rejectf(midsag.ReasonDuplicateInstance,
				"SOP Instance UID %s appears twice with different content (%s): %s and %s; remove the wrong copy",
				in.SOPInstanceUID, diff, sourceName(prev), sourceName(in))
		}
	}
	return out, nil
}

// instanceDiff names what differs between two instances, or "" when they
// are identical but for their source.
func instanceDiff(a, b *midsag.Instance) string {
	if a.TransferSyntaxUID != b.TransferSyntaxUID {
		return "transfer syntaxes " + a.TransferSyntaxUID + " and " + b.TransferSyntaxUID
	}
	if !bytes.Equal(a.PixelData, b.PixelData) || len(a.Fragments) != len(b.Fragments) {
		return "pixel data differs"
	}
	for i := range a.Fragments {
		if !bytes.Equal(a.Fragments[i], b.Fragments[i]) {
			return "pixel data differs"
		}
	}
	ha, hb := *a, *b
	ha.Source, hb.Source = "", ""
	ha.PixelData, hb.PixelData = nil, nil
	ha.Fragments, hb.Fragments = nil, nil
	if !reflect.DeepEqual(ha, hb) {
		return "header attributes differ"
	}
	return ""
}

func sourceName(in *midsag.Instance) string {
	if in.Source == "" {
		return "an unnamed input"
	}
	return in.Source
}
