package preprocess

import "github.com/midsag/midsag/inputs"

// Limits bound what Read accepts, so a hostile or corrupt file is refused
// before it costs memory or time.
type Limits struct {
	// MaxFileBytes caps the size of one Part 10 stream (after inflating a
	// deflated dataset). Default inputs.MaxInstanceBytes, the bound every
	// input edge puts on one instance.
	MaxFileBytes int64
	// MaxPixels caps Rows x Columns of one frame. Default 4096 x 4096.
	MaxPixels int64
	// MaxFrames caps Number of Frames. Default 1024.
	MaxFrames int
	// MaxElementBytes caps the value length of any one element. Default
	// equals MaxFileBytes.
	MaxElementBytes int64
}

// Options configure a Preprocessor.
type Options struct {
	Limits Limits
	// Lenient accepts streams without the 128-byte preamble and "DICM"
	// prefix (PS3.10 7.1), as some old archives store them.
	Lenient bool
}

func (o Options) withDefaults() Options {
	if o.Limits.MaxFileBytes <= 0 {
		o.Limits.MaxFileBytes = inputs.MaxInstanceBytes
	}
	if o.Limits.MaxPixels <= 0 {
		o.Limits.MaxPixels = 4096 * 4096
	}
	if o.Limits.MaxFrames <= 0 {
		o.Limits.MaxFrames = 1024
	}
	if o.Limits.MaxElementBytes <= 0 {
		o.Limits.MaxElementBytes = o.Limits.MaxFileBytes
	}
	return o
}

// Preprocessor implements midsag.Preprocessor. It is safe for concurrent use.
type Preprocessor struct {
	opts Options
}

// New returns a Preprocessor with the given options; zero fields take their
// defaults.
func New(opts Options) *Preprocessor {
	return &Preprocessor{opts: opts.withDefaults()}
}
