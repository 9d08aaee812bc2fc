package main

import (
	"encoding/json"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/internal/testtool"
	"github.com/midsag/midsag/phantom"
)

// linkedStudy lays one phantom study out as data-versioning tools do:
// under dir/cohort, a folder of symbolic links to the files, which sit in
// dir/objects, plus a link loop back to the cohort and a dangling link.
// It returns a symbolic link to the cohort folder and the study's truth.
func linkedStudy(t *testing.T) (string, phantom.StudyTruth) {
	t.Helper()
	dir := t.TempDir()
	objects := filepath.Join(dir, "objects")
	truths, err := phantom.Generate(objects, phantom.Options{Studies: 1, Seed: 61, NoDecoys: true})
	if err != nil {
		t.Fatal(err)
	}
	cohortDir := filepath.Join(dir, "cohort", "study-1")
	if err := os.MkdirAll(cohortDir, 0o755); err != nil {
		t.Fatal(err)
	}
	files, _ := filepath.Glob(filepath.Join(objects, truths[0].Study, "*"))
	for _, f := range files {
		if err := os.Symlink(f, filepath.Join(cohortDir, filepath.Base(f))); err != nil {
			t.Fatal(err)
		}
	}
	for _, l := range [][2]string{
		{filepath.Join(dir, "cohort"), filepath.Join(cohortDir, "loop")},
		{filepath.Join(objects, "not-fetched"), filepath.Join(cohortDir, "zz-not-fetched.dcm")},
		{filepath.Join(dir, "cohort"), filepath.Join(dir, "cohort-link")},
	} {
		if err := os.Symlink(l[0], l[1]); err != nil {
			t.Fatal(err)
		}
	}
	return filepath.Join(dir, "cohort-link"), truths[0]
}

// TestScoreAndBatchFollowLinks: score and batch given a link to a folder
// of links find the study (the phantom's truth), stop at the link loop,
// and report the dangling link (score: a skipped_files flag; batch: an
// unreadable file in the discovery counts).
func TestScoreAndBatchFollowLinks(t *testing.T) {
	requireORT(t)
	root, truth := linkedStudy(t)
	code, out, errs := runCLI("score", "--json", root)
	if code != exitOK {
		t.Fatalf("score: exit %d: %s", code, errs)
	}
	var res midsag.Result
	if err := json.Unmarshal([]byte(out), &res); err != nil {
		t.Fatal(err)
	}
	if res.StudyInstanceUID != truth.StudyInstanceUID || res.SeriesInstanceUID != truth.TargetSeriesUID {
		t.Errorf("score: study %s series %s, want %s %s", res.StudyInstanceUID, res.SeriesInstanceUID, truth.StudyInstanceUID, truth.TargetSeriesUID)
	}
	if !strings.Contains(strings.Join(res.QualityFlags, ","), "skipped_files:no_input:1") {
		t.Errorf("score: flags %v do not report the dangling link", res.QualityFlags)
	}

	outDir := t.TempDir()
	code, sout, errs := runCLI("batch", "--out", outDir, "--workers", "1", root)
	if code != exitOK {
		t.Fatalf("batch: exit %d: %s", code, errs)
	}
	if !regexp.MustCompile(`file unreadable +1\n`).MatchString(sout) {
		t.Errorf("batch summary does not count the dangling link as unreadable:\n%s", sout)
	}
	rows := testtool.ReadCSV(t, filepath.Join(outDir, "results.csv"))
	if len(rows) != 2 || !strings.Contains(strings.Join(rows[1], ","), truth.StudyInstanceUID) {
		t.Errorf("batch rows %v, want the one linked study", rows)
	}
}

// TestBatchNoStudyExitsRejected: batch on an empty root, or on one with
// only non-DICOM files, exits 3 with reason no_input and says what it saw.
func TestBatchNoStudyExitsRejected(t *testing.T) {
	requireORT(t)
	junk := t.TempDir()
	if err := os.WriteFile(filepath.Join(junk, "notes.txt"), []byte("not DICOM"), 0o644); err != nil {
		t.Fatal(err)
	}
	for root, want := range map[string]string{t.TempDir(): "no files", junk: "1 not_dicom"} {
		code, _, errs := runCLI("batch", "--out", t.TempDir(), "--workers", "1", root)
		if code != exitRejected || !strings.Contains(errs, "no_input") || !strings.Contains(errs, want) {
			t.Errorf("%s: exit %d, stderr %q; want %d, no_input and %q", root, code, errs, exitRejected, want)
		}
	}
}
