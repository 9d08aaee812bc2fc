package main

import (
	"archive/zip"
	"bufio"
	"bytes"
	"context"
	"encoding/json"
	"os"
	"os/exec"
	"path/filepath"
	"reflect"
	"strconv"
	"strings"
	"sync"
	"testing"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/internal/testtool"
	"github.com/midsag/midsag/phantom"
	"github.com/midsag/midsag/preprocess"
)

// batchCohort is a phantom cohort with broken studies mixed in. want maps
// each Study Instance UID to the "status/reason" its row must have, known
// from how each study was made (the phantom's truth and the damage done),
// not from midsag; series maps scored studies to the phantom's target
// series.
type batchCohort struct {
	root, labels string
	want, series map[string]string
}

// makeBatchCohort writes n studies: n-2 phantom studies (one cut in half,
// one zipped, one with a stray non-DICOM file), one with only its axial
// and localizer series, and one whose transfer syntax is rewritten to JPEG
// 2000 Part 2 multi-component, which midsag does not decode; plus a
// non-DICOM file at the top.
func makeBatchCohort(t *testing.T, n int) batchCohort {
	t.Helper()
	root := t.TempDir()
	main := filepath.Join(root, "site-a")
	truths, err := phantom.Generate(main, phantom.Options{Studies: n - 2, Seed: 11, NoDecoys: true})
	if err != nil {
		t.Fatal(err)
	}
	c := batchCohort{root: root, labels: filepath.Join(main, "labels.csv"), want: map[string]string{}, series: map[string]string{}}
	for _, tr := range truths {
		c.want[tr.StudyInstanceUID] = "scored/"
		c.series[tr.StudyInstanceUID] = tr.TargetSeriesUID
	}
	// Truncated: every file of study 0 cut in half.
	files, _ := filepath.Glob(filepath.Join(main, truths[0].Study, "*"))
	for _, f := range files {
		b, err := os.ReadFile(f)
		if err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(f, b[:len(b)/2], 0o644); err != nil {
			t.Fatal(err)
		}
	}
	c.want[truths[0].StudyInstanceUID] = "rejected/truncated"
	// Study 1 comes as a zip archive, nested deeper.
	zipStudyInto(t, filepath.Join(main, truths[1].Study), filepath.Join(root, "archive", "deep", "upload.zip"))
	// Study 2 holds a stray non-DICOM file.
	if err := os.WriteFile(filepath.Join(main, truths[2].Study, "IM9999.dcm"), []byte("scanner log, not DICOM\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(root, "README.txt"), []byte("cohort notes\n"), 0o644); err != nil {
		t.Fatal(err)
	}

	// Decoy series only: a study with decoys, its T2 sagittal series deleted.
	dec := t.TempDir()
	dtr, err := phantom.Generate(dec, phantom.Options{Studies: 1, Seed: 12})
	if err != nil {
		t.Fatal(err)
	}
	pre := preprocess.New(preprocess.Options{})
	dfiles, _ := filepath.Glob(filepath.Join(dec, dtr[0].Study, "*"))
	kept := 0
	for _, f := range dfiles {
		b, err := os.ReadFile(f)
		if err != nil {
			t.Fatal(err)
		}
		inst, err := pre.Read(f, bytes.NewReader(b))
		if err != nil {
			t.Fatal(err)
		}
		// Keep the axial and localizer series: drop every sagittal one
		// (normal row x column mostly along the patient's x, PS3.3
		// C.7.6.2.1.1), not just the T2 target.
		o := inst.ImageOrientation
		nx, ny, nz := o[1]*o[5]-o[2]*o[4], o[2]*o[3]-o[0]*o[5], o[0]*o[4]-o[1]*o[3]
		if inst.SeriesInstanceUID == dtr[0].TargetSeriesUID || nx*nx > ny*ny+nz*nz {
			continue
		}
		kept++
		writeFile(t, filepath.Join(root, "site-b", "decoys", filepath.Base(f)), b)
	}
	if kept == 0 {
		t.Fatal("phantom wrote no decoy series")
	}
	c.want[dtr[0].StudyInstanceUID] = "rejected/no_sagittal_t2_series"

	// JPEG 2000 Part 2 Multi-component Image Compression (Lossless Only)
	// (PS3.6 Annex A, 1.2.840.10008.1.2.4.92) in place of JPEG Lossless
	// SV1: same length, so only the UID's bytes change.
	jdir := t.TempDir()
	jtr, err := phantom.Generate(jdir, phantom.Options{Studies: 1, Seed: 13, NoDecoys: true, Syntaxes: []string{midsag.JPEGLosslessSV1}})
	if err != nil {
		t.Fatal(err)
	}
	jfiles, _ := filepath.Glob(filepath.Join(jdir, jtr[0].Study, "*"))
	for _, f := range jfiles {
		b, err := os.ReadFile(f)
		if err != nil {
			t.Fatal(err)
		}
		b = bytes.Replace(b, []byte("1.2.840.10008.1.2.4.70"), []byte("1.2.840.10008.1.2.4.92"), 1)
		writeFile(t, filepath.Join(root, "site-b", "j2k", filepath.Base(f)), b)
	}
	c.want[jtr[0].StudyInstanceUID] = "rejected/unsupported_transfer_syntax"
	return c
}

func writeFile(t *testing.T, path string, b []byte) {
	t.Helper()
	if err := os.MkdirAll(filepath.Dir(path), 0o755); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(path, b, 0o644); err != nil {
		t.Fatal(err)
	}
}

// zipStudyInto moves a study folder into a zip archive.
func zipStudyInto(t *testing.T, dir, archive string) {
	t.Helper()
	var buf bytes.Buffer
	zw := zip.NewWriter(&buf)
	files, _ := filepath.Glob(filepath.Join(dir, "*"))
	for _, f := range files {
		b, err := os.ReadFile(f)
		if err != nil {
			t.Fatal(err)
		}
		w, err := zw.Create("study/" + filepath.Base(f))
		if err != nil {
			t.Fatal(err)
		}
		w.Write(b)
	}
	if err := zw.Close(); err != nil {
		t.Fatal(err)
	}
	writeFile(t, archive, buf.Bytes())
	if err := os.RemoveAll(dir); err != nil {
		t.Fatal(err)
	}
}

// readTable reads a results.csv as a header and rows keyed by study.
func readTable(t *testing.T, path string) ([]string, [][]string) {
	t.Helper()
	recs := testtool.ReadCSV(t, path)
	return recs[0], recs[1:]
}

// withoutElapsed drops the elapsed_ms column, the one that differs
// between runs.
func withoutElapsed(t *testing.T, path string) [][]string {
	t.Helper()
	head, rows := readTable(t, path)
	col := -1
	for i, h := range head {
		if h == "elapsed_ms" {
			col = i
		}
	}
	out := [][]string{append(append([]string{}, head[:col]...), head[col+1:]...)}
	for _, r := range rows {
		out = append(out, append(append([]string{}, r[:col]...), r[col+1:]...))
	}
	return out
}

func batchSize() int {
	if os.Getenv("MIDSAG_LONG") == "1" {
		return 300
	}
	return 60
}

// TestBatchEndToEnd scores a cohort with broken studies mixed in: every
// study gets exactly one row with the status and reason its damage
// implies (outside truth: the phantom's own record and the bytes changed
// above), scored rows name the phantom's target series, labels join, and
// the table feeds midsag evaluate. Then a run killed with SIGKILL and
// resumed, and three shard processes merged, each equal the uninterrupted
// run in every column but elapsed_ms. 60 studies by default, 300 with
// MIDSAG_LONG=1.
func TestBatchEndToEnd(t *testing.T) {
	requireORT(t)
	c := makeBatchCohort(t, batchSize())
	ctx := context.Background()
	outA := t.TempDir()
	var so, se bytes.Buffer
	if code := run(ctx, []string{"batch", "--out", outA, "--labels", c.labels, c.root}, &so, &se); code != 0 {
		t.Fatalf("batch exit %d: %s", code, se.String())
	}
	if !strings.Contains(so.String(), midsag.Notice) || !strings.Contains(so.String(), "studies per hour") {
		t.Errorf("summary lacks the notice or the rate:\n%s", so.String())
	}
	if !strings.Contains(so.String(), "file not_dicom") {
		t.Errorf("summary does not count the non-DICOM files:\n%s", so.String())
	}
	checkBatchRows(t, c, filepath.Join(outA, "results.csv"))
	var eo, ee bytes.Buffer
	if code := run(ctx, []string{"evaluate", "--table", filepath.Join(outA, "results.csv"), "--score-col", "calibrated_probability",
		"--label-col", "label", "--positive", "1"}, &eo, &ee); code != 0 {
		t.Errorf("evaluate on the batch table: exit %d: %s", code, ee.String())
	}
	want := withoutElapsed(t, filepath.Join(outA, "results.csv"))

	t.Run("KillAndResume", func(t *testing.T) { killAndResume(t, c, want) })
	t.Run("ShardsMerged", func(t *testing.T) { shardsMerged(t, c, want) })
}

// checkBatchRows checks the batch table: one row per study, sorted by
// Study Instance UID, with the status and reason the cohort's damage
// implies, the phantom's series for scored rows and the joined label.
func checkBatchRows(t *testing.T, c batchCohort, table string) {
	t.Helper()
	labels := map[string]string{}
	{
		_, rows := readTable(t, c.labels)
		for _, r := range rows {
			labels[r[0]] = r[1]
		}
	}
	head, rows := readTable(t, table)
	col := map[string]int{}
	for i, h := range head {
		col[h] = i
	}
	seen := map[string]bool{}
	prev := ""
	for _, r := range rows {
		uid := r[col["study_instance_uid"]]
		if seen[uid] {
			t.Errorf("study %s has two rows", uid)
		}
		seen[uid] = true
		if uid <= prev {
			t.Errorf("rows not sorted by study_instance_uid at %s", uid)
		}
		prev = uid
		got := r[col["status"]] + "/" + r[col["reason"]]
		if got != c.want[uid] {
			t.Errorf("study %s: %s, want %s (%s)", uid, got, c.want[uid], r[col["message"]])
		}
		if got == "scored/" && r[col["series_instance_uid"]] != c.series[uid] {
			t.Errorf("study %s: series %s, the phantom's T2 sagittal is %s", uid, r[col["series_instance_uid"]], c.series[uid])
		}
		// The phantom writes single-frame instances: no frame number; a
		// scored row has a confidence in [0, 1], an unscored one none.
		conf, cerr := strconv.ParseFloat(r[col["midline_confidence"]], 64)
		if r[col["center_frame_number"]] != "" || (got == "scored/") != (cerr == nil && conf >= 0 && conf <= 1) {
			t.Errorf("study %s (%s): center_frame_number %q, midline_confidence %q", uid, got, r[col["center_frame_number"]], r[col["midline_confidence"]])
		}
		if r[col["label"]] != labels[uid] {
			t.Errorf("study %s: label %q, labels.csv says %q", uid, r[col["label"]], labels[uid])
		}
	}
	if len(seen) != len(c.want) {
		t.Errorf("%d rows for %d studies", len(seen), len(c.want))
	}
}

// killAndResume kills a batch with SIGKILL a third of the way through,
// resumes it and compares the table with want.
func killAndResume(t *testing.T, c batchCohort, want [][]string) {
	ctx := context.Background()
	out := t.TempDir()
	cmd := exec.Command(os.Args[0], "--", "batch", "--out", out, "--labels", c.labels, "--progress-every", "50ms", c.root)
	cmd.Env = append(os.Environ(), "MIDSAG_TEST_AS_MAIN=1")
	stderr, err := cmd.StderrPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	killed := false
	sc := bufio.NewScanner(stderr)
	for sc.Scan() {
		var line struct{ Done, Total int }
		if json.Unmarshal(sc.Bytes(), &line) == nil && line.Total > 0 && line.Done >= line.Total/3 {
			cmd.Process.Kill() // SIGKILL: no chance to clean up
			killed = true
			break
		}
	}
	cmd.Wait()
	if !killed {
		t.Fatal("the batch finished before it could be killed")
	}
	var so, se bytes.Buffer
	if code := run(ctx, []string{"batch", "--out", out, "--labels", c.labels, c.root}, &so, &se); code != 0 {
		t.Fatalf("resume exit %d: %s", code, se.String())
	}
	if strings.Contains(so.String(), " 0 done before") {
		t.Errorf("the resumed run redid every study:\n%s", so.String())
	}
	if got := withoutElapsed(t, filepath.Join(out, "results.csv")); !reflect.DeepEqual(got, want) {
		t.Errorf("resumed table differs from the uninterrupted one:\n%v\nwant\n%v", got, want)
	}
}

// shardsMerged runs three shard processes, merges them and compares the
// table with want; a shard given twice and a shard of another model are
// refused.
func shardsMerged(t *testing.T, c batchCohort, want [][]string) {
	ctx := context.Background()
	base := t.TempDir()
	var dirs []string
	var wg sync.WaitGroup
	errs := make([]error, 3)
	outs := make([][]byte, 3)
	for i := 0; i < 3; i++ {
		dir := filepath.Join(base, "shard", string(rune('0'+i)))
		dirs = append(dirs, dir)
		cmd := exec.Command(os.Args[0], "--", "batch", "--out", dir, "--workers", "1", "--labels", c.labels,
			"--shard", string(rune('0'+i))+"/3", c.root)
		cmd.Env = append(os.Environ(), "MIDSAG_TEST_AS_MAIN=1")
		wg.Add(1)
		go func() {
			defer wg.Done()
			outs[i], errs[i] = cmd.CombinedOutput()
		}()
	}
	wg.Wait()
	for i, err := range errs {
		if err != nil {
			t.Fatalf("shard %d: %v\n%s", i, err, outs[i])
		}
	}
	merged := filepath.Join(base, "merged")
	var so, se bytes.Buffer
	if code := run(ctx, append([]string{"merge", "--out", merged}, dirs...), &so, &se); code != 0 {
		t.Fatalf("merge exit %d: %s", code, se.String())
	}
	if got := withoutElapsed(t, filepath.Join(merged, "results.csv")); !reflect.DeepEqual(got, want) {
		t.Errorf("merged shards differ from the single run")
	}
	// A shard given twice overlaps itself.
	se.Reset()
	if code := run(ctx, []string{"merge", "--out", t.TempDir(), dirs[0], dirs[1], dirs[0]}, &so, &se); code != exitRejected || !strings.Contains(se.String(), "overlapping_studies") {
		t.Errorf("overlapping shards: exit %d, %s", code, se.String())
	}
	// A shard made with another model (its sha256 edited) is refused.
	jl := filepath.Join(dirs[2], "results.jsonl")
	b, err := os.ReadFile(jl)
	if err != nil {
		t.Fatal(err)
	}
	var r struct {
		ModelSHA256 string `json:"model_sha256"`
	}
	json.Unmarshal(b[:bytes.IndexByte(b, '\n')], &r)
	writeFile(t, jl, bytes.ReplaceAll(b, []byte(r.ModelSHA256), []byte(strings.Repeat("0", 64))))
	se.Reset()
	if code := run(ctx, append([]string{"merge", "--out", t.TempDir()}, dirs...), &so, &se); code != exitRejected || !strings.Contains(se.String(), "mixed_models") {
		t.Errorf("mixed models: exit %d, %s", code, se.String())
	}
}

// TestBatchUsage checks the refusals that need no model.
func TestBatchUsage(t *testing.T) {
	ctx := context.Background()
	for _, tc := range []struct {
		args []string
		code int
	}{
		{[]string{"batch", t.TempDir()}, exitUsage},
		{[]string{"batch", "--out", t.TempDir(), "--shard", "3/3", t.TempDir()}, exitUsage},
		{[]string{"batch", "--out", t.TempDir(), "--workers", "0", t.TempDir()}, exitUsage},
		{[]string{"batch", "--out", t.TempDir(), filepath.Join(t.TempDir(), "missing")}, exitRejected},
		{[]string{"merge", "--out", t.TempDir()}, exitUsage},
		{[]string{"merge", "--out", t.TempDir(), t.TempDir()}, exitRejected},
	} {
		var so, se bytes.Buffer
		if code := run(ctx, tc.args, &so, &se); code != tc.code {
			t.Errorf("%v: exit %d, want %d: %s", tc.args, code, tc.code, se.String())
		}
	}
}
