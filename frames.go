package midsag

// FrameAttrs are the attributes of one frame of a multi-frame image that
// differ from frame to frame or live in functional groups rather than at
// the top level: the frame's values after the Shared Functional Groups
// and then the frame's Per-frame Functional Groups item have been applied
// over the top-level attributes (a per-frame value overrides a shared one,
// PS3.3 C.7.6.16).
type FrameAttrs struct {
	// ImageOrientation and ImagePosition come from the Plane Orientation
	// (0020,9116) and Plane Position (0020,9113) macros (PS3.3 C.7.6.16.2.4,
	// C.7.6.16.2.3); HasGeometry is false when either is missing.
	ImageOrientation [6]float64
	ImagePosition    [3]float64
	HasGeometry      bool
	// PixelSpacing, SliceThickness and SpacingBetweenSlices come from Pixel
	// Measures (0028,9110) (PS3.3 C.7.6.16.2.1).
	PixelSpacing         [2]float64
	SliceThickness       float64
	SpacingBetweenSlices float64
	// RepetitionTime and FlipAngle come from MR Timing and Related
	// Parameters (0018,9112), EchoTime is Effective Echo Time (0018,9082)
	// of MR Echo (0018,9114), the b-value from MR Diffusion (0018,9117)
	// (PS3.3 C.8.13.5).
	RepetitionTime     float64
	EchoTime           float64
	InversionTime      float64
	FlipAngle          float64
	DiffusionBValue    float64
	HasDiffusionBValue bool
	// ImageType is Frame Type (0008,9007) of MR Image Frame Type (0018,9226)
	// (PS3.3 C.8.13.5.1), or the top-level Image Type when absent.
	ImageType []string
	// RescaleSlope and RescaleIntercept come from Pixel Value Transformation
	// (0028,9145) (PS3.3 C.7.6.16.2.9).
	RescaleSlope     float64
	RescaleIntercept float64
	// StackID, InStackPosition and DimensionIndex are Stack ID (0020,9056),
	// In-Stack Position Number (0020,9057) and Dimension Index Values
	// (0020,9157) of Frame Content (0020,9111) (PS3.3 C.7.6.16.2.2).
	StackID         string
	InStackPosition int
	DimensionIndex  []int
}

// FramesAsSlices reports whether midsag reads the frames of a multi-frame
// instance of this SOP Class as slices: Enhanced MR Image Storage and
// Legacy Converted Enhanced MR Image Storage, whose functional groups give
// every frame its own plane (PS3.3 A.36.2, A.71).
func FramesAsSlices(sopClassUID string) bool {
	return sopClassUID == EnhancedMRImageStorage || sopClassUID == LegacyConvertedEnhancedMRImageStorage
}

// Frames returns one Instance per frame of a multi-frame Enhanced MR or
// Legacy Converted Enhanced MR instance, each a copy of in with the
// frame's attributes from PerFrame (the top-level ones when the file has
// no functional groups), Frame set to its 0-based index and PerFrame nil.
// The copies share in's pixel data: no pixel byte is copied. Any other
// instance, and a frame already expanded, is returned alone, unchanged.
func (in *Instance) Frames() []*Instance {
	if in.expanded || !FramesAsSlices(in.SOPClassUID) || (in.NumberOfFrames <= 1 && len(in.PerFrame) == 0) {
		return []*Instance{in}
	}
	out := make([]*Instance, max(in.NumberOfFrames, len(in.PerFrame)))
	for i := range out {
		c := *in
		c.PerFrame = nil
		c.Frame = i
		c.expanded = true
		if i < len(in.PerFrame) {
			f := &in.PerFrame[i]
			c.ImageOrientation, c.ImagePosition, c.HasGeometry = f.ImageOrientation, f.ImagePosition, f.HasGeometry
			c.PixelSpacing, c.SliceThickness, c.SpacingBetweenSlices = f.PixelSpacing, f.SliceThickness, f.SpacingBetweenSlices
			c.RepetitionTime, c.EchoTime, c.InversionTime, c.FlipAngle = f.RepetitionTime, f.EchoTime, f.InversionTime, f.FlipAngle
			c.DiffusionBValue, c.HasDiffusionBValue = f.DiffusionBValue, f.HasDiffusionBValue
			c.ImageType = f.ImageType
			c.RescaleSlope, c.RescaleIntercept = f.RescaleSlope, f.RescaleIntercept
			c.StackID, c.InStackPosition, c.DimensionIndex = f.StackID, f.InStackPosition, f.DimensionIndex
		}
		out[i] = &c
	}
	return out
}

// FrameNumber is the 1-based number of the frame in its source instance
// (frames are numbered from 1, PS3.3 C.7.6.6), as Referenced Frame Number
// (0008,1160) names it; 0 for a single-frame instance.
func (in *Instance) FrameNumber() int {
	if in.NumberOfFrames > 1 {
		return in.Frame + 1
	}
	return 0
}
