// Package holdoutphantom runs a third synthetic family of sagittal T2
// cervical spine series, held out from the midline picker: it exists only
// to measure preprocess.PickSlices on data the picker was never tuned on.
//
// The generator is gen.py (Python, numpy and pydicom), written without
// reading package phantom, internal/crossphantom or preprocess, in another
// language, with its own anatomy model (vertebrae, discs, dural sac and
// cord, spinous processes, paraspinal muscle and fat, skull base, set in a
// body frame turned by the head's yaw, roll and pitch), its own layout
// (one single-frame MR Image Storage series per study, Explicit VR Little
// Endian) and its own scenarios (centred, offset, lateral_only, partial).
// The truth is the slice nearest the plane of the cord centreline at the
// C3 to C6 levels, known from the construction.
//
// The package lives under internal/ because only the project's tests use
// it, and apart from the other two families so that none of them can
// share code with it. Use it from a test:
//
//	cases := holdoutphantom.Generate(t, holdoutphantom.Options{N: 60, Seed: 7})
//
// Generate skips the test when /usr/bin/python3 with numpy and pydicom is
// missing, or fails it when MIDSAG_REQUIRE_TOOLS=1 (internal/testtool).
package holdoutphantom
