// Package demo bundles midsag's demonstration model: a small CNN trained on
// synthetic sagittal T2 phantoms to flag spinal cord compression. It lets
// `midsag demo` and `midsag score` run with no configuration. It has never
// seen a real scan and is for demonstration and testing only; README.md
// beside this file says how it was made.
package demo

import _ "embed"

// Name is the file name the embedded model is known by.
const Name = "midsag-demo.onnx"

// ONNX is the demo model with its manifest embedded in the ONNX metadata.
//
//go:embed midsag-demo.onnx
var ONNX []byte
