// Package explain makes occlusion-sensitivity maps (Zeiler and Fergus
// 2014) of a midsag model's output and draws them: a heatmap PNG over the
// centre slice and the same picture as a DICOM Secondary Capture image.
//
// Use it as the Pipeline's Explainer:
//
//	p := &midsag.Pipeline{Pre: pre, Model: m, Explainer: explain.New(explain.Options{})}
//	res, _ := p.Run(ctx, sources)
//	png, _ := explain.Heatmap(res)
//	dcm, _ := explain.SecondaryCapture(res, explain.SCOptions{})
//
// A patch of the input stack, in all slices at once, is replaced by a
// baseline and the model rerun; the drop in output against the unoccluded
// run is the patch's value, and overlapping patches are averaged per
// pixel. To stay cheap on large models the map is made coarse to fine:
// a coarse grid first, then only the highest cells are refined, patches
// wholly on air or padding are not run, and occluded copies are batched.
package explain
