// Package evaluate measures how well a score separates labelled cases and
// how well its probabilities are calibrated, and compares it with a second
// score or a human reader on the same cases.
//
// The one way to use it: read a table with ReadTable, then call Run with
// Options; the returned *Summary marshals to the JSON the CLI prints and
// WriteReport turns it into report.md and report.html. The functions Run
// uses (AUC, DeLong, Compare, ROC, Wilson, McNemar, Brier, ECE,
// CalibrationFit, NetBenefit, Bootstrap) are exported for callers that need
// one number.
//
// Every formula cites its source beside the code. Results are for research
// use only (midsag.Notice).
package evaluate
