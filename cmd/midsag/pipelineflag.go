package main

import (
	"flag"

	"github.com/midsag/midsag/models"
	"github.com/midsag/midsag/pipeline"
	"github.com/midsag/midsag/preprocess"
)

// pipelineFlags are the flags of every verb that builds a Pipeline from
// the command line (score, batch, serve): the model, --lenient, --explain
// and the occlusion-map options.
type pipelineFlags struct {
	modelFlags
	lenient bool
	explain bool
	explainFlags
}

// register adds the flags; explainUsage says what --explain does for the
// verb.
func (p *pipelineFlags) register(fs *flag.FlagSet, explainUsage string) {
	p.modelFlags.register(fs)
	fs.BoolVar(&p.lenient, "lenient", false, "accept DICOM files without the 128-byte preamble and DICM prefix")
	fs.BoolVar(&p.explain, "explain", false, explainUsage)
	p.explainFlags.register(fs)
}

// config checks the flags and returns the Pipeline configuration they ask
// for with the model's session options; a bad value is a usage error.
func (p *pipelineFlags) config(session models.Options) (pipeline.Config, error) {
	eopts, err := p.explainFlags.options()
	if err != nil {
		return pipeline.Config{}, err
	}
	return pipeline.Config{
		Preprocess:     preprocess.Options{Lenient: p.lenient},
		Model:          p.modelFlags.configWith(session),
		Explain:        p.explain,
		ExplainOptions: eopts,
	}, nil
}
