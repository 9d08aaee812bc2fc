package preprocess

import (
	"bytes"
	"fmt"
	"reflect"
	"sort"
	"strings"

	"github.com/midsag/midsag"
)

// Group sorts instances into studies by Study Instance UID and each study
// into series by Series Instance UID, from their headers alone. Duplicate
// SOP Instance UIDs keep their first occurrence. Studies and series are
// ordered by UID and series number so the result does not depend on file
// order.
//
// A multi-frame Enhanced MR or Legacy Converted Enhanced MR instance is
// expanded into one Instance per frame (midsag.Instance.Frames), and its
// frames are split into separate series by Stack ID, orientation, echo
// time, b-value and Frame Type: one such file may hold several stacks or
// contrasts (PS3.3 C.7.6.16.2.2, C.8.13), and each is judged on its own.
// The parts keep the Series Instance UID; their descriptions name the
// split in numbers, e.g. "SAG T2 [stack 2, TE 90 ms]".
func Group(instances []*midsag.Instance) []*midsag.Study {
	studies := map[string]*midsag.Study{}
	series := map[string]*midsag.Series{}
	parts := map[string][]*part{} // by study and series UID
	seen := map[string]bool{}
	for _, src := range instances {
		if seen[src.SOPInstanceUID] {
			continue
		}
		seen[src.SOPInstanceUID] = true
		st := studies[src.StudyInstanceUID]
		if st == nil {
			st = &midsag.Study{StudyInstanceUID: src.StudyInstanceUID}
			studies[src.StudyInstanceUID] = st
		}
		base := src.StudyInstanceUID + "\x00" + src.SeriesInstanceUID
		for _, in := range src.Frames() {
			key := base
			var pt *part
			if in != src {
				pt = partOf(parts, base, in)
				key = base + "\x00" + pt.key
			}
			se := series[key]
			if se == nil {
				se = &midsag.Series{SeriesInstanceUID: in.SeriesInstanceUID, SeriesNumber: in.SeriesNumber, Description: in.SeriesDescription}
				series[key] = se
				st.Series = append(st.Series, se)
				if pt != nil {
					pt.series = se
				}
			}
			se.Instances = append(se.Instances, in)
		}
	}
	labelParts(parts)
	out := make([]*midsag.Study, 0, len(studies))
	for _, st := range studies {
		sort.Slice(st.Series, func(i, j int) bool {
			a, b := st.Series[i], st.Series[j]
			if a.SeriesNumber != b.SeriesNumber {
				return a.SeriesNumber < b.SeriesNumber
			}
			if a.SeriesInstanceUID != b.SeriesInstanceUID {
				return a.SeriesInstanceUID < b.SeriesInstanceUID
			}
			return a.Description < b.Description
		})
		for _, se := range st.Series {
			sort.Slice(se.Instances, func(i, j int) bool {
				a, b := se.Instances[i], se.Instances[j]
				if a.SOPInstanceUID != b.SOPInstanceUID {
					return a.SOPInstanceUID < b.SOPInstanceUID
				}
				return a.Frame < b.Frame
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

// part is one series' worth of frames of multi-frame instances: frames of
// one stack, plane, echo time, b-value and Frame Type.
type part struct {
	key    string
	ref    *midsag.Instance // first frame, for the orientation test
	stack  string
	te, b  float64
	hasB   bool
	ftype  string
	series *midsag.Series
}

// partOf returns the part of series base that frame in belongs to, adding
// one if none fits. Orientations match within the tolerance SortSlices
// uses for one series, so rounding noise in direction cosines does not
// split a stack.
func partOf(parts map[string][]*part, base string, in *midsag.Instance) *part {
	ftype := strings.ToUpper(strings.Join(in.ImageType, `\`))
	for _, p := range parts[base] {
		if p.stack == in.StackID && p.te == in.EchoTime && p.b == in.DiffusionBValue && p.hasB == in.HasDiffusionBValue &&
			p.ftype == ftype && sameOrientation(p.ref, in) {
			return p
		}
	}
	p := &part{key: fmt.Sprint(len(parts[base])), ref: in, stack: in.StackID, te: in.EchoTime,
		b: in.DiffusionBValue, hasB: in.HasDiffusionBValue, ftype: ftype}
	parts[base] = append(parts[base], p)
	return p
}

func sameOrientation(a, b *midsag.Instance) bool {
	if a.HasGeometry != b.HasGeometry {
		return false
	}
	if !a.HasGeometry {
		return true
	}
	return rowDir(a).dot(rowDir(b)) >= orientationTolerance && colDir(a).dot(colDir(b)) >= orientationTolerance
}

// labelParts appends to the description of every part of a split series
// what sets it apart from the series' other parts.
func labelParts(parts map[string][]*part) {
	for _, ps := range parts {
		if len(ps) < 2 {
			continue
		}
		differ := func(f func(p *part) string) bool {
			for _, p := range ps[1:] {
				if f(p) != f(ps[0]) {
					return true
				}
			}
			return false
		}
		fields := []func(p *part) string{
			func(p *part) string { return "stack " + p.stack },
			func(p *part) string { return planeName(p.ref) },
			func(p *part) string { return fmt.Sprintf("TE %g ms", p.te) },
			func(p *part) string {
				if !p.hasB {
					return "no b-value"
				}
				return fmt.Sprintf("b %g", p.b)
			},
			func(p *part) string { return p.ftype },
		}
		var used []func(p *part) string
		for _, f := range fields {
			if differ(f) {
				used = append(used, f)
			}
		}
		for _, p := range ps {
			if p.series == nil {
				continue
			}
			var l []string
			for _, f := range used {
				l = append(l, f(p))
			}
			p.series.Description = strings.TrimSpace(p.series.Description + " [" + strings.Join(l, ", ") + "]")
		}
	}
}

// planeName names a frame's plane by its normal. Only numbers: words
// such as "sagittal" or "plane" would feed the description cues of series
// picking.
func planeName(in *midsag.Instance) string {
	if !in.HasGeometry {
		return "no position"
	}
	n := Normal(in)
	return fmt.Sprintf("normal (%.2f, %.2f, %.2f)", n[0], n[1], n[2])
}
