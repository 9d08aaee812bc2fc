package main

import (
	"crypto/sha256"
	"encoding/csv"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/models"
)

// calibTable is the 200-row fixture of package models (logit, prob and
// label "pos"/"neg"; see models/testdata/calib/make_reference.py).
const calibTable = "../../models/testdata/calib/table.csv"

// TestCalibrateWritesSidecar fits Platt scaling for a copy of
// tiny_logit.onnx, stores it with --write, and checks that the model then
// loads with the new calibrator, that Interpret applies
// 1/(1+exp(A·f+B)) (Platt 1999, eq. 1) to a raw logit f, and that the
// .onnx bytes are unchanged. A second run with --prevalence updates the
// sidecar it finds and keeps its other fields.
func TestCalibrateWritesSidecar(t *testing.T) {
	dir := t.TempDir()
	model := filepath.Join(dir, "m.onnx")
	copyFile(t, "../../models/testdata/tiny_logit.onnx", model)
	before := fileSHA(t, model)

	rep := calibrateJSON(t, "--table", calibTable, "--score-col", "logit", "--label-col", "label",
		"--positive", "pos", "--method", "platt", "--model", model, "--write", "--json")
	if rep.Notice != midsag.Notice || rep.ScoreKind != "logit" || rep.Rows != 200 || rep.Positives != 63 ||
		rep.Spec.Platt == nil || rep.Sidecar != models.SidecarPath(model) {
		t.Fatalf("report %+v", rep)
	}
	// Platt scaling fits NLL directly, so it must not make the table's NLL worse.
	if !(rep.After.NLL < rep.Before.NLL) {
		t.Errorf("NLL %v before, %v after", rep.Before.NLL, rep.After.NLL)
	}
	if after := fileSHA(t, model); after != before {
		t.Fatalf("the .onnx file changed")
	}

	requireORT(t)
	a, b := rep.Spec.Platt.A, rep.Spec.Platt.B
	if s, want := interpretWith(t, model, 1.5), 1/(1+math.Exp(a*1.5+b)); s.Method != "platt" || math.Abs(s.Calibrated-want) > 1e-9 {
		t.Errorf("Interpret(1.5) = %+v, want platt and %v", s, want)
	}

	rep = calibrateJSON(t, "--table", calibTable, "--score-col", "logit", "--label-col", "label",
		"--positive", "pos", "--method", "isotonic", "--prevalence", "0.1", "--model", model, "--write", "--json")
	side, err := os.ReadFile(models.SidecarPath(model))
	if err != nil {
		t.Fatal(err)
	}
	man, err := models.ParseManifest(side)
	if err != nil {
		t.Fatal(err)
	}
	if ps := man.Calibration.PriorShift; man.Name != "tiny_logit" || ps == nil || ps.TrainPrevalence != 0.315 || ps.TargetPrevalence != 0.1 {
		t.Errorf("sidecar manifest %+v", man)
	}
	iso := models.Isotonic{X: rep.Spec.Isotonic.X, Y: rep.Spec.Isotonic.Y}
	want := models.ShiftPrior(iso.Calibrate(models.Sigmoid(0.3)), 0.315, 0.1)
	if s := interpretWith(t, model, 0.3); s.Method != "isotonic+prior_shift" || math.Abs(s.Calibrated-want) > 1e-12 {
		t.Errorf("Interpret(0.3) = %+v, want isotonic+prior_shift and %v", s, want)
	}
	if fileSHA(t, model) != before {
		t.Fatalf("the .onnx file changed")
	}
}

// calibrateJSON runs calibrate with args, which include --json, and
// returns its report; a nonzero exit fails the test.
func calibrateJSON(t *testing.T, args ...string) calibrateReport {
	t.Helper()
	code, out, errs := runCLI(append([]string{"calibrate"}, args...)...)
	if code != exitOK {
		t.Fatalf("calibrate %v: exit %d: %s", args, code, errs)
	}
	var rep calibrateReport
	if err := json.Unmarshal([]byte(out), &rep); err != nil {
		t.Fatal(err)
	}
	return rep
}

// interpretWith loads the model file as it now is (sidecar included) and
// interprets one raw output with it.
func interpretWith(t *testing.T, model string, raw float64) midsag.Score {
	t.Helper()
	m, err := models.Load(model, models.Options{IntraOpThreads: 1})
	if err != nil {
		t.Fatalf("model no longer loads: %v", err)
	}
	defer m.Close()
	return m.Interpret(raw)
}

// TestCalibrateOutTable checks --out: every original column kept, a
// calibrated column equal to temperature scaling sigmoid(logit(p)/T)
// (Guo et al. 2017) with the printed T, probabilities being the default
// score kind.
func TestCalibrateOutTable(t *testing.T) {
	outPath := filepath.Join(t.TempDir(), "cal.csv")
	code, out, errs := runCLI("calibrate", "--table", calibTable, "--score-col", "prob", "--label-col", "label",
		"--positive", "pos", "--method", "temperature", "--out", outPath)
	if code != exitOK {
		t.Fatalf("exit %d: %s", code, errs)
	}
	if !strings.Contains(out, midsag.Notice) || !strings.Contains(out, "T = ") || !strings.Contains(out, "10 equal-width bins") {
		t.Errorf("summary lacks the notice, T or the ECE binning:\n%s", out)
	}
	f, err := os.Open(outPath)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	recs, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	if strings.Join(recs[0], ",") != "case,logit,prob,label,calibrated" || len(recs) != 201 {
		t.Fatalf("header %q, %d lines", recs[0], len(recs))
	}
	tStr := out[strings.Index(out, "T = ")+4:]
	temp, err := strconv.ParseFloat(strings.Fields(tStr)[0], 64)
	if err != nil {
		t.Fatal(err)
	}
	for _, r := range recs[1:] {
		p, _ := strconv.ParseFloat(r[2], 64)
		c, err := strconv.ParseFloat(r[4], 64)
		// T is printed to 6 digits, so allow for that.
		if want := models.Sigmoid(models.Logit(p) / temp); err != nil || math.Abs(c-want) > 1e-5 {
			t.Fatalf("row %q: calibrated %v, want %v", r, c, want)
		}
	}
}

func TestCalibrateRefusals(t *testing.T) {
	dir := t.TempDir()
	write := func(name, body string) string {
		p := filepath.Join(dir, name)
		if err := os.WriteFile(p, []byte(body), 0o644); err != nil {
			t.Fatal(err)
		}
		return p
	}
	good := write("good.csv", "s,y\n0.2,a\n0.7,b\n0.4,a\n")
	oneClass := write("one.csv", "s,y\n0.2,b\n0.7,b\n")
	notNum := write("nan.csv", "s,y\n0.2,a\nhigh,b\n")
	outPath := filepath.Join(dir, "out.csv")
	base := func(table string) []string {
		return []string{"calibrate", "--table", table, "--score-col", "s", "--label-col", "y", "--positive", "b", "--out", outPath}
	}
	for _, c := range []struct {
		name string
		args []string
		code int
		msg  string
	}{
		{"unknown method", append(base(good), "--method", "beta"), exitUsage, `--method is "beta"`},
		{"label not present", append(base(good)[:7], "--positive", "c", "--method", "platt"), exitRejected, `positive label "c" never occurs`},
		{"one class", append(base(oneClass), "--method", "platt"), exitRejected, "needs both classes"},
		{"non-numeric score", append(base(notNum), "--method", "isotonic"), exitRejected, `line 3: score "high"`},
		{"missing column", append(base(good), "--method", "platt", "--score-col", "nope"), exitRejected, `no column "nope"`},
		{"write without model", append(base(good), "--method", "platt", "--write"), exitUsage, "--write needs --model"},
		{"probability out of range", append(base(write("big.csv", "s,y\n2.5,a\n0.7,b\n")), "--method", "platt"), exitRejected, "--score-kind"},
	} {
		code, _, errs := runCLI(c.args...)
		if code != c.code || !strings.Contains(errs, c.msg) {
			t.Errorf("%s: exit %d, stderr %q; want %d and %q", c.name, code, errs, c.code, c.msg)
		}
		if code == exitRejected && !strings.Contains(errs, "bad_table") {
			t.Errorf("%s: stderr %q lacks the reason code", c.name, errs)
		}
		if _, err := os.Stat(outPath); err == nil {
			t.Fatalf("%s: --out was written although the run failed", c.name)
		}
	}
}

func fileSHA(t *testing.T, path string) [32]byte {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	return sha256.Sum256(b)
}
