// Package preprocess turns DICOM Part 10 streams into a model input: it reads
// headers with limits, groups instances into studies and series, picks the
// T2-weighted sagittal series with a scored heuristic, scores every slice's
// closeness to the patient's midsagittal plane, decodes the picked slices
// and stacks them as a 2.5D tensor.
//
// Use New to get a Preprocessor, which implements midsag.Preprocessor:
//
//	pre := preprocess.New(preprocess.Options{})
//	inst, err := pre.Read("IM0001.dcm", f)
//	prep, err := pre.Prepare(ctx, instances, spec)
//
// Every refusal is a *midsag.Error carrying a reason code.
package preprocess
