package midsag

import (
	"context"
	"crypto/rand"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"sort"
	"time"
)

// Preprocessor reads DICOM instances and turns a study into a model input.
// preprocess.Preprocessor implements it.
type Preprocessor interface {
	// Read parses one DICOM Part 10 stream; pixel data stays undecoded.
	Read(name string, r io.Reader) (*Instance, error)
	// Prepare groups instances, picks the target series and the slices
	// nearest the midsagittal plane, and builds the input tensor.
	Prepare(ctx context.Context, instances []*Instance, spec InputSpec) (*Prepared, error)
}

// Model runs a classifier on a prepared input. models.Model implements it.
type Model interface {
	Info() ModelInfo
	InputSpec() InputSpec
	// Predict returns the positive-class raw output for each item of the
	// batch in the tensor's first dimension.
	Predict(ctx context.Context, in *Tensor) ([]float64, error)
	// Interpret turns a raw output into probabilities and a decision.
	Interpret(raw float64) Score
}

// Explainer explains a model's score of a prepared input, for example
// with an occlusion map. explain.Occlusion implements it.
type Explainer interface {
	// Explain returns the explanation of raw, the model's output for
	// prep.Input; instances are the study's instances, for the geometry
	// of the stacked slices.
	Explain(ctx context.Context, m Model, prep *Prepared, instances []*Instance, raw float64) (*Explanation, error)
}

// Source is one input stream: a file, a zip entry, an upload part or a
// received dataset.
type Source struct {
	Name string
	Open func() (io.ReadCloser, error)
}

// Pipeline is the one path from a study's instances to a Result. The CLI,
// the server, the DICOM listener and the cohort runner all call it.
type Pipeline struct {
	Pre   Preprocessor
	Model Model
	// Explainer, when set, adds an Explanation to every result.
	Explainer Explainer
	// Now and NewID default to time.Now and a random 128-bit hex id.
	Now   func() time.Time
	NewID func() string
}

// Read reads every source. Sources that are not readable DICOM are skipped
// and counted in the returned flags, unless none is readable: then the
// first refusal is returned.
func (p *Pipeline) Read(ctx context.Context, sources []Source) ([]*Instance, []string, error) {
	if len(sources) == 0 {
		return nil, nil, Rejectf(ReasonNoInput, "no input files were given or found")
	}
	var (
		out      []*Instance
		firstErr error
		skipped  = map[Reason]int{}
	)
	for _, s := range sources {
		if err := ctx.Err(); err != nil {
			return nil, nil, err
		}
		inst, err := p.readOne(s)
		if err != nil {
			e := RefusalOf(err)
			if e == nil {
				return nil, nil, fmt.Errorf("read %s: %w", s.Name, err)
			}
			skipped[e.Reason]++
			if firstErr == nil {
				firstErr = fmt.Errorf("%s: %w", s.Name, e.WithDetail("source", s.Name))
			}
			continue
		}
		out = append(out, inst)
	}
	if len(out) == 0 {
		return nil, nil, firstErr
	}
	var flags []string
	for r, n := range skipped {
		flags = append(flags, fmt.Sprintf("skipped_files:%s:%d", r, n))
	}
	sort.Strings(flags)
	return out, flags, nil
}

func (p *Pipeline) readOne(s Source) (*Instance, error) {
	rc, err := s.Open()
	if err != nil {
		return nil, err
	}
	defer rc.Close()
	inst, err := p.Pre.Read(s.Name, rc)
	if err != nil {
		return nil, err
	}
	inst.Source = s.Name
	return inst, nil
}

// Run reads the sources and scores them as one study; files skipped while
// reading are reported in the result's quality flags.
func (p *Pipeline) Run(ctx context.Context, sources []Source) (*Result, error) {
	t0 := time.Now()
	insts, flags, err := p.Read(ctx, sources)
	if err != nil {
		return nil, err
	}
	readMS := ms(time.Since(t0))
	res, err := p.Score(ctx, insts)
	if err != nil {
		return nil, err
	}
	res.QualityFlags = append(res.QualityFlags, flags...)
	res.TimingsMS["read"] = readMS
	res.TimingsMS["total"] += readMS
	return res, nil
}

// Score runs preprocessing and the model on the instances of one study.
func (p *Pipeline) Score(ctx context.Context, instances []*Instance) (*Result, error) {
	if p.Pre == nil || p.Model == nil {
		return nil, errors.New("pipeline: preprocessor and model are required")
	}
	now := time.Now
	if p.Now != nil {
		now = p.Now
	}
	start := now()
	prep, err := p.Pre.Prepare(ctx, instances, p.Model.InputSpec())
	if err != nil {
		return nil, err
	}
	t0 := time.Now()
	raw, err := p.Model.Predict(ctx, prep.Input)
	if err != nil {
		return nil, fmt.Errorf("predict: %w", err)
	}
	if len(raw) != 1 {
		return nil, fmt.Errorf("predict: model returned %d outputs for one input", len(raw))
	}
	predictMS := ms(time.Since(t0))
	t1 := time.Now()
	sc := p.Model.Interpret(raw[0])
	timings := map[string]float64{}
	for k, v := range prep.TimingsMS {
		timings[k] = v
	}
	timings["predict"] = predictMS
	timings["calibrate"] = ms(time.Since(t1))
	var expl *Explanation
	if p.Explainer != nil {
		t2 := time.Now()
		expl, err = p.Explainer.Explain(ctx, p.Model, prep, instances, raw[0])
		if err != nil {
			return nil, fmt.Errorf("explain: %w", err)
		}
		timings["explain"] = ms(time.Since(t2))
	}
	timings["total"] = ms(now().Sub(start))

	flags := append([]string{}, prep.QualityFlags...)
	id := newID
	if p.NewID != nil {
		id = p.NewID
	}
	return &Result{
		ResultID:             id(),
		CreatedAt:            start.UTC(),
		StudyInstanceUID:     prep.StudyInstanceUID,
		SeriesInstanceUID:    prep.SeriesInstanceUID,
		CenterSOPInstanceUID: prep.CenterSOPInstanceUID,
		MidlineConfidence:    prep.MidlineConfidence,
		CenterFrameNumber:    prep.CenterFrameNumber,
		Slices:               prep.Slices,
		SeriesCandidates:     prep.Candidates,
		Model:                p.Model.Info(),
		RawOutput:            sc.RawOutput,
		Probability:          sc.Probability,
		CalibratedProb:       sc.Calibrated,
		CalibrationMethod:    sc.Method,
		Threshold:            sc.Threshold,
		Decision:             sc.Decision,
		QualityFlags:         flags,
		Explanation:          expl,
		Notice:               Notice,
		TimingsMS:            timings,
	}, nil
}

func ms(d time.Duration) float64 { return float64(d.Microseconds()) / 1000 }

func newID() string {
	var b [16]byte
	// crypto/rand.Read never returns an error on supported platforms (Go 1.24+).
	_, _ = rand.Read(b[:])
	return hex.EncodeToString(b[:])
}
