// Package models runs a research group's ONNX binary classifier on the CPU
// through ONNX Runtime and turns its output into a calibrated probability.
//
// A model is one .onnx file plus its manifest (see Manifest): JSON stored in
// the model's metadata_props under the key "midsag.manifest", or a sidecar
// NAME.manifest.json beside NAME.onnx that wins over the embedded one. The
// one way to use the package:
//
//	lib, err := models.FindLibrary(flagPath)
//	err = models.Init(lib)
//	m, err := models.Load("model.onnx", models.Options{})
//	defer m.Close()
//	raw, err := m.Predict(ctx, tensor)
//	score := m.Interpret(raw[0])
//
// *Model implements midsag.Model. Inspect reads a model file without
// running it, for "midsag model inspect".
package models
