package main

import (
	"flag"
	"fmt"

	"github.com/midsag/midsag/models"
	"github.com/midsag/midsag/models/demo"
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

// load finds and initialises ONNX Runtime, then loads the model with
// --threads intra-op threads and one run at a time.
func (m *modelFlags) load() (*models.Model, error) {
	return m.loadWith(models.Options{IntraOpThreads: m.threads})
}

// loadWith is load with explicit session options.
func (m *modelFlags) loadWith(opts models.Options) (*models.Model, error) {
	lib, err := models.FindLibrary(m.ortLib)
	if err != nil {
		return nil, err
	}
	if err := models.Init(lib); err != nil {
		return nil, fmt.Errorf("start ONNX Runtime from %s: %w", lib, err)
	}
	if m.model == "" {
		return models.LoadBytes(demo.Name, demo.ONNX, nil, opts)
	}
	return models.Load(m.model, opts)
}
