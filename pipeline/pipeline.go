// Package pipeline builds the one midsag.Pipeline from configuration: the
// preprocessor with its options, the model (a file or the bundled demo
// model, on ONNX Runtime found the usual way) and, when asked, the
// occlusion explainer. Every command and the server get their Pipeline,
// or its parts, here, so none wires the implementations itself:
//
//	p, m, err := pipeline.New(pipeline.Config{Model: pipeline.ModelConfig{Path: path}})
//	if err != nil { ... }
//	defer m.Close()
//	res, err := p.Run(ctx, sources)
package pipeline

import (
	"fmt"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/explain"
	"github.com/midsag/midsag/models"
	"github.com/midsag/midsag/models/demo"
	"github.com/midsag/midsag/preprocess"
)

// ModelConfig says which model to load and how.
type ModelConfig struct {
	// Path is the model file (.onnx with its manifest); empty means the
	// bundled demo model.
	Path string
	// ORTLib is the ONNX Runtime shared library; empty searches as
	// models.FindLibrary does.
	ORTLib string
	// Session sets intra-op threads and concurrent runs.
	Session models.Options
}

// Config is everything a Pipeline is built from.
type Config struct {
	Preprocess preprocess.Options
	Model      ModelConfig
	// Explain adds an occlusion map with ExplainOptions to every result.
	Explain        bool
	ExplainOptions explain.Options
}

// New loads the model and returns the Pipeline built from cfg with it.
// The caller closes the model when the Pipeline is no longer used; the
// model is returned as its concrete type for the server's registry.
func New(cfg Config) (*midsag.Pipeline, *models.Model, error) {
	m, err := LoadModel(cfg.Model)
	if err != nil {
		return nil, nil, err
	}
	p := &midsag.Pipeline{Pre: Preprocessor(cfg.Preprocess), Model: m}
	if cfg.Explain {
		p.Explainer = Explainer(cfg.ExplainOptions)
	}
	return p, m, nil
}

// Preprocessor returns the preprocessor for opts. It also reads headers
// alone (ReadHeader), for batch discovery and the server's ingest.
func Preprocessor(opts preprocess.Options) *preprocess.Preprocessor {
	return preprocess.New(opts)
}

// Explainer returns the occlusion explainer for opts.
func Explainer(opts explain.Options) midsag.Explainer {
	return explain.New(opts)
}

// LoadModel finds and initialises ONNX Runtime, then loads the model mc
// names (the bundled demo model when mc.Path is empty).
func LoadModel(mc ModelConfig) (*models.Model, error) {
	lib, err := models.FindLibrary(mc.ORTLib)
	if err != nil {
		return nil, err
	}
	if err := models.Init(lib); err != nil {
		return nil, fmt.Errorf("start ONNX Runtime from %s: %w", lib, err)
	}
	if mc.Path == "" {
		return models.LoadBytes(demo.Name, demo.ONNX, nil, mc.Session)
	}
	return models.Load(mc.Path, mc.Session)
}
