// Package phantom writes synthetic cervical spine MRI studies as DICOM MR
// Image Storage instances, for the demo, for training the demo model and for
// testing the series and midline slice pickers.
//
// Each study images an analytic neck in patient coordinates (DICOM LPS, mm,
// PS3.3 C.7.6.2.1.1) belonging to the fictional Northfield Spine Imaging
// Lab's screening cohort for spinal cord compression. The neck has a real,
// image-visible midsagittal plane (spinous processes, nuchal ligament, the
// full width of the canal and cord) that is shifted and rotated away from
// the scanner planes, and about half the studies carry a disc bulge or
// osteophyte that indents the cord at one level. Because the anatomy is
// analytic, StudyTruth records the exact centre slice and label.
//
// The one way to use it:
//
//	files, truth, err := phantom.GenerateStudy(phantom.Options{Seed: 7}, 0)
//
// or phantom.Generate to write a whole cohort with labels.csv and
// truth.json. Output is deterministic for a given Seed and study index.
// ToEnhancedMR converts a study's series into one Enhanced MR or Legacy
// Converted Enhanced MR multi-frame instance, for testing the frame reader.
package phantom
