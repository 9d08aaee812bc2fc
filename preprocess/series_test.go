package preprocess

import (
	"bytes"
	"strings"
	"testing"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/phantom"
)

// readStudy reads the files of one phantom study.
func readStudy(t *testing.T, files []phantom.File) *midsag.Study {
	t.Helper()
	pre := New(Options{})
	var insts []*midsag.Instance
	for _, f := range files {
		in, err := pre.Read(f.Name, bytes.NewReader(f.Data))
		if err != nil {
			t.Fatalf("%s: %v", f.Name, err)
		}
		insts = append(insts, in)
	}
	return Group(insts)[0]
}

// TestPickSeriesAmongDecoys checks the series pick on phantom studies with
// T1 sagittal, STIR sagittal, T2 axial and localizer decoys whose
// descriptions vary and sometimes mislead; the phantom's truth names the
// T2 sagittal series. The TR/TE thresholds are common practice.
func TestPickSeriesAmongDecoys(t *testing.T) {
	opts := phantom.Options{Studies: 8, Seed: 404}
	for i := 0; i < opts.Studies; i++ {
		files, truth, err := phantom.GenerateStudy(opts, i)
		if err != nil {
			t.Fatal(err)
		}
		st := readStudy(t, files)
		se, cands, _, err := PickSeries(st, 3)
		if err != nil {
			t.Fatalf("study %d: %v", i, err)
		}
		if se.SeriesInstanceUID != truth.TargetSeriesUID {
			t.Errorf("study %d: picked %q, want the T2 sagittal series; candidates %+v", i, se.Description, cands)
		}
		if len(cands) != len(st.Series) {
			t.Errorf("study %d: %d candidates for %d series", i, len(cands), len(st.Series))
		}
		for _, c := range cands {
			if len(c.Reasons) == 0 {
				t.Errorf("study %d: candidate %q has no reasons", i, c.Description)
			}
		}
	}
}

// TestPickSeriesFallbacks removes series from a phantom study: without the
// T2 series the STIR series is taken and flagged; without T2 and STIR the
// study is refused.
func TestPickSeriesFallbacks(t *testing.T) {
	files, truth, err := phantom.GenerateStudy(phantom.Options{Studies: 1, Seed: 405}, 0)
	if err != nil {
		t.Fatal(err)
	}
	st := readStudy(t, files)
	var rest []*midsag.Series
	for _, se := range st.Series {
		if se.SeriesInstanceUID != truth.TargetSeriesUID {
			rest = append(rest, se)
		}
	}
	st.Series = rest
	se, _, flags, err := PickSeries(st, 3)
	if err != nil {
		t.Fatalf("without T2: %v", err)
	}
	if se.Instances[0].InversionTime == 0 || !strings.Contains(strings.Join(flags, ","), "series_is_stir") {
		t.Errorf("without T2: picked %q (TI %v), flags %v; want the STIR series flagged", se.Description, se.Instances[0].InversionTime, flags)
	}
	var noSTIR []*midsag.Series
	for _, s := range rest {
		if s != se {
			noSTIR = append(noSTIR, s)
		}
	}
	st.Series = noSTIR
	if _, _, _, err := PickSeries(st, 3); !isReason(err, midsag.ReasonNoSagittalT2) {
		t.Errorf("without T2 and STIR: %v, want no_sagittal_t2_series", err)
	}
}
