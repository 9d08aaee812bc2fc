package main

import (
	"flag"

	"github.com/midsag/midsag/models"
	"github.com/midsag/midsag/pipeline"
)

// modelFlags are the flags every verb that runs a model shares.
type modelFlags struct {
	model   string
	ortLib  string
	threads int
}

func (m *modelFlags) register(fs *flag.FlagSet) {
	fs.StringVar(&m.model, "model", "", "model `file` (.onnx with its manifest); empty uses the bundled demo model")
	fs.StringVar(&m.ortLib, "ort-lib", "", "ONNX Runtime shared library `path` (default: found next to the binary, under third_party/onnxruntime/, or on the system path)")
	fs.IntVar(&m.threads, "threads", 0, "ONNX Runtime intra-op threads (0 = all cores)")
}

// config returns the model the flags name with --threads intra-op
// threads and one run at a time.
func (m *modelFlags) config() pipeline.ModelConfig {
	return m.configWith(models.Options{IntraOpThreads: m.threads})
}

// configWith is config with explicit session options.
func (m *modelFlags) configWith(opts models.Options) pipeline.ModelConfig {
	return pipeline.ModelConfig{Path: m.model, ORTLib: m.ortLib, Session: opts}
}
