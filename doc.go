// Package midsag holds the domain types of the midsag service and the one
// Pipeline that turns the instances of a cervical spine MRI study into a
// calibrated research-use probability.
//
// The steps themselves live in subpackages that implement the interfaces
// declared here: preprocess (DICOM reading, series and slice picking, the
// 2.5D stack) and models (ONNX Runtime inference and calibration). The CLI,
// the server, the DICOM listener and the cohort runner all call
// Pipeline.Score; none of them re-implements a step.
//
// Every Result carries Notice: midsag is a research tool and makes no
// diagnostic claim.
package midsag

// Notice is the research-use notice carried by every output of midsag.
const Notice = "RESEARCH USE ONLY. Not a medical device and not for diagnosis, " +
	"treatment or surgical planning. Output is from an experimental model run on " +
	"research data; it must be reviewed under the local ethics approval and " +
	"regulations, and never replaces licensed clinical judgement."
