package midsag_test

import (
	"bytes"
	"context"
	"errors"
	"io"
	"strings"
	"testing"
	"time"

	"github.com/midsag/midsag"
)

// fakePre accepts sources whose content starts with "DICM" and refuses the
// rest as not_dicom; Prepare returns a fixed tensor.
type fakePre struct{}

func (fakePre) Read(name string, r io.Reader) (*midsag.Instance, error) {
	b, _ := io.ReadAll(r)
	if !bytes.HasPrefix(b, []byte("DICM")) {
		return nil, midsag.Rejectf(midsag.ReasonNotDICOM, "not DICOM")
	}
	return &midsag.Instance{SOPInstanceUID: name, StudyInstanceUID: "1.2"}, nil
}

func (fakePre) Prepare(ctx context.Context, in []*midsag.Instance, spec midsag.InputSpec) (*midsag.Prepared, error) {
	return &midsag.Prepared{StudyInstanceUID: in[0].StudyInstanceUID, Input: &midsag.Tensor{Shape: []int64{1}, Data: []float32{0}},
		QualityFlags: []string{"prep_flag"}, TimingsMS: map[string]float64{"stack": 1}}, nil
}

type fakeModel struct{ outputs int }

func (fakeModel) Info() midsag.ModelInfo      { return midsag.ModelInfo{Name: "fake"} }
func (fakeModel) InputSpec() midsag.InputSpec { return midsag.InputSpec{Slices: 3} }
func (fakeModel) Interpret(r float64) midsag.Score {
	return midsag.Score{RawOutput: r, Calibrated: 0.25, Decision: "negative"}
}
func (m fakeModel) Predict(ctx context.Context, in *midsag.Tensor) ([]float64, error) {
	return make([]float64, m.outputs), nil
}

func src(name, body string) midsag.Source {
	return midsag.Source{Name: name, Open: func() (io.ReadCloser, error) { return io.NopCloser(strings.NewReader(body)), nil }}
}

// slowSrc is a source whose Open takes at least d, so reading it takes a
// known least time.
func slowSrc(name, body string, d time.Duration) midsag.Source {
	return midsag.Source{Name: name, Open: func() (io.ReadCloser, error) {
		time.Sleep(d)
		return io.NopCloser(strings.NewReader(body)), nil
	}}
}

// TestPipelineRunSkipsUnreadableFiles: an unreadable file is skipped and
// counted in the flags; the read time (at least the 20 ms one source
// takes to open) is reported as "read" and included in "total".
func TestPipelineRunSkipsUnreadableFiles(t *testing.T) {
	p := &midsag.Pipeline{Pre: fakePre{}, Model: fakeModel{outputs: 1}, NewID: func() string { return "id1" }}
	res, err := p.Run(context.Background(), []midsag.Source{src("a", "DICM..."), src("notes.txt", "hello"), slowSrc("b", "DICM", 20*time.Millisecond)})
	if err != nil {
		t.Fatal(err)
	}
	flags := strings.Join(res.QualityFlags, ",")
	if flags != "prep_flag,skipped_files:not_dicom:1" {
		t.Errorf("flags %q", flags)
	}
	if res.Notice != midsag.Notice || res.ResultID != "id1" || res.CalibratedProb != 0.25 {
		t.Errorf("result %+v", res)
	}
	read, total := res.TimingsMS["read"], res.TimingsMS["total"]
	if read < 20 || total < read {
		t.Errorf("timings read %v ms (want at least 20), total %v ms (want at least read)", read, total)
	}
}

func TestPipelineRefusesWhenNothingReadable(t *testing.T) {
	p := &midsag.Pipeline{Pre: fakePre{}, Model: fakeModel{outputs: 1}}
	_, err := p.Run(context.Background(), []midsag.Source{src("x.png", "\x89PNG")})
	if r, _ := midsag.ReasonOf(err); r != midsag.ReasonNotDICOM || !strings.Contains(err.Error(), "x.png") {
		t.Errorf("got %v, want not_dicom naming the file", err)
	}
	_, err = p.Run(context.Background(), nil)
	if r, _ := midsag.ReasonOf(err); r != midsag.ReasonNoInput {
		t.Errorf("no sources: %v, want no_input", err)
	}
}

func TestPipelineChecksModelOutputCount(t *testing.T) {
	p := &midsag.Pipeline{Pre: fakePre{}, Model: fakeModel{outputs: 2}}
	_, err := p.Run(context.Background(), []midsag.Source{src("a", "DICM")})
	if err == nil || errors.Is(err, context.Canceled) {
		t.Errorf("two outputs for one input: %v", err)
	}
}
