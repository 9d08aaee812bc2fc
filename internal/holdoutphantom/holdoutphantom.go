package holdoutphantom

import (
	_ "embed"
	"encoding/json"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"sort"
	"strconv"
	"testing"

	"github.com/midsag/midsag/internal/testtool"
)

// script is the generator, embedded so the package works from any
// working directory and the bytes run are the bytes reviewed.
//
//go:embed gen.py
var script []byte

// checkScript reads a generated series back with pydicom (check.py).
//
//go:embed check.py
var checkScript []byte

// Options choose which series Generate writes.
type Options struct {
	// N series numbered First to First+N-1; each number fixes the
	// scenario (number mod 4) and the slice thickness.
	N, First int
	// Seed makes the family: the same seed and number give the same bytes.
	Seed int
	// Scenario, when set, overrides the scenario of every series:
	// centred, offset, lateral_only or partial.
	Scenario string
	// Clean leaves out the noise and the bias field.
	Clean bool
	// Fixed, when set, is "YAW,ROLL,OFFSET_SLICES": the head's pose in
	// degrees and the truth plane's offset from the slab's centre in
	// slices, with no pitch and no slab obliquity.
	Fixed string
	// Slices, when above zero, sets the number of slices of every series.
	Slices int
}

// Truth is what one series holds, from the construction (truth.json).
type Truth struct {
	Case              int    `json:"case"`
	Scenario          string `json:"scenario"`
	StudyInstanceUID  string `json:"study_instance_uid"`
	SeriesInstanceUID string `json:"series_instance_uid"`
	// MidlineSOPInstanceUID is the slice whose centre is nearest the
	// truth plane, also when the plane lies outside the slab.
	MidlineSOPInstanceUID string `json:"midline_sop_instance_uid"`
	// SignedDistanceMM is the plane's position minus that slice's, along
	// the slice normal (Image Orientation (Patient) row x column).
	SignedDistanceMM float64 `json:"signed_distance_mm"`
	// InSlab is true when the plane lies within half a spacing of the
	// outer slices' centres.
	InSlab bool `json:"in_slab"`
	// PlanePositionMM is the plane's position along the slice normal,
	// and SlicePositionsMM each slice's (Image Position (Patient) dot the
	// normal), in the order of SOPInstanceUIDs.
	PlanePositionMM  float64   `json:"plane_position_mm"`
	SliceNormal      []float64 `json:"slice_normal"`
	SOPInstanceUIDs  []string  `json:"sop_instance_uids"`
	SlicePositionsMM []float64 `json:"slice_positions_mm"`
	ThicknessMM      float64   `json:"thickness_mm"`
	SpacingMM        float64   `json:"spacing_mm"`
	Slices           int       `json:"slices"`
	Matrix           int       `json:"matrix"`
	FOVMM            float64   `json:"fov_mm"`
	YawDeg           float64   `json:"yaw_deg"`
	RollDeg          float64   `json:"roll_deg"`
	PitchDeg         float64   `json:"pitch_deg"`
	OffsetSlices     float64   `json:"offset_slices"`
	CompressedDiscs  []string  `json:"compressed_discs"`
}

// File is one generated DICOM file.
type File struct {
	Name string
	Data []byte
}

// Case is one generated series: its files, in instance order, and truth.
type Case struct {
	Dir   string
	Files []File
	Truth Truth
}

// Generate runs the generator into a temporary folder of t and returns
// the series in number order. It skips or fails t (internal/testtool)
// when Python with numpy and pydicom is missing.
func Generate(t testing.TB, o Options) []Case {
	t.Helper()
	py := testtool.Python(t, "numpy", "pydicom")
	dir := t.TempDir()
	gen := filepath.Join(dir, "gen.py")
	if err := os.WriteFile(gen, script, 0o644); err != nil {
		t.Fatal(err)
	}
	out := filepath.Join(dir, "series")
	args := []string{gen, "--out", out, "--n", strconv.Itoa(o.N), "--first", strconv.Itoa(o.First),
		"--seed", strconv.Itoa(o.Seed), "--workers", strconv.Itoa(runtime.GOMAXPROCS(0))}
	if o.Scenario != "" {
		args = append(args, "--scenario", o.Scenario)
	}
	if o.Clean {
		args = append(args, "--clean")
	}
	if o.Fixed != "" {
		args = append(args, "--fixed", o.Fixed)
	}
	if o.Slices > 0 {
		args = append(args, "--slices", strconv.Itoa(o.Slices))
	}
	if b, err := exec.Command(py, args...).CombinedOutput(); err != nil {
		t.Fatalf("gen.py %v: %v\n%s", args[1:], err, b)
	}
	cases, err := load(out)
	if err != nil {
		t.Fatal(err)
	}
	return cases
}

// load reads the series the generator wrote under out.
func load(out string) ([]Case, error) {
	b, err := os.ReadFile(filepath.Join(out, "index.json"))
	if err != nil {
		return nil, fmt.Errorf("generator index: %w", err)
	}
	var index []struct {
		Dir string `json:"dir"`
	}
	if err := json.Unmarshal(b, &index); err != nil {
		return nil, fmt.Errorf("generator index: %w", err)
	}
	cases := make([]Case, 0, len(index))
	for _, e := range index {
		c := Case{Dir: filepath.Join(out, e.Dir)}
		tb, err := os.ReadFile(filepath.Join(c.Dir, "truth.json"))
		if err != nil {
			return nil, fmt.Errorf("series %s: %w", e.Dir, err)
		}
		if err := json.Unmarshal(tb, &c.Truth); err != nil {
			return nil, fmt.Errorf("series %s truth: %w", e.Dir, err)
		}
		names, err := filepath.Glob(filepath.Join(c.Dir, "*.dcm"))
		if err != nil {
			return nil, err
		}
		sort.Strings(names)
		for _, n := range names {
			d, err := os.ReadFile(n)
			if err != nil {
				return nil, fmt.Errorf("series %s: %w", e.Dir, err)
			}
			c.Files = append(c.Files, File{Name: filepath.Join(e.Dir, filepath.Base(n)), Data: d})
		}
		if len(c.Files) != c.Truth.Slices {
			return nil, fmt.Errorf("series %s: %d files, truth says %d slices", e.Dir, len(c.Files), c.Truth.Slices)
		}
		cases = append(cases, c)
	}
	return cases, nil
}

// Check runs check.py, which reads every file of dirs with pydicom and
// recomputes each slice's position and the truth's nearest slice from
// the headers alone, and returns its report.
func Check(t testing.TB, dirs ...string) []CheckReport {
	t.Helper()
	py := testtool.Python(t, "numpy", "pydicom")
	p := filepath.Join(t.TempDir(), "check.py")
	if err := os.WriteFile(p, checkScript, 0o644); err != nil {
		t.Fatal(err)
	}
	b, err := exec.Command(py, append([]string{p}, dirs...)...).Output()
	if err != nil {
		t.Fatalf("check.py: %v\n%s", err, b)
	}
	var r []CheckReport
	if err := json.Unmarshal(b, &r); err != nil {
		t.Fatalf("check.py output: %v\n%s", err, b)
	}
	return r
}

// CheckReport is what check.py found in one series folder.
type CheckReport struct {
	Dir string `json:"dir"`
	// Files is how many files pydicom read; Errors what was wrong.
	Files  int      `json:"files"`
	Errors []string `json:"errors"`
	// Nearest is the SOP Instance UID pydicom's positions put nearest
	// the truth plane, InSlab whether they hold it, DistanceMM the
	// plane's signed distance from that slice.
	Nearest    string  `json:"nearest"`
	InSlab     bool    `json:"in_slab"`
	DistanceMM float64 `json:"distance_mm"`
	// CSFCentroidMM is, on clean series, the position along the normal
	// of the centroid of the CSF-bright pixels (>= 0.9 of the maximum) in
	// the image's lower half, the neck, where only the dural sac is that
	// bright.
	CSFCentroidMM float64 `json:"csf_centroid_mm"`
}
