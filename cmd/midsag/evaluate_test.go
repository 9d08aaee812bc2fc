package main

import (
	"bytes"
	"context"
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/internal/testtool"
)

func writeTemp(t *testing.T, dir, name, body string) string {
	t.Helper()
	p := filepath.Join(dir, name)
	if err := os.WriteFile(p, []byte(body), 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

// TestEvaluateJoinJSONAndReport runs the verb on a small hand-made scores
// file joined with a labels file on an id, with one empty score and one id
// without a label. Expected figures are hand counts (stated beside each
// check); the outside-reference checks live in evaluate/reference_test.go.
func TestEvaluateJoinJSONAndReport(t *testing.T) {
	dir := t.TempDir()
	scores := "id,score,other,reader\n" +
		"a,0.9,0.8,1\nb,0.8,0.3,1\nc,0.7,0.75,0\nd,0.35,0.2,0\ne,0.6,0.65,1\nf,0.3,0.1,0\n" +
		"g,0.2,0.4,0\nh,0.65,0.2,1\ni,0.1,0.3,0\nj,0.4,0.45,1\nk,,0.5,1\nz,0.5,0.5,1\n"
	labels := "id,truth\na,yes\nb,yes\nc,no\nd,yes\ne,yes\nf,no\ng,no\nh,no\ni,no\nj,yes\nk,yes\n"
	tp, lp := writeTemp(t, dir, "scores.csv", scores), writeTemp(t, dir, "labels.csv", labels)
	rep := filepath.Join(dir, "report")
	var out, errb bytes.Buffer
	code := run(context.Background(), []string{"evaluate", "--table", tp, "--labels", lp, "--id-col", "id",
		"--label-col", "truth", "--positive", "yes", "--score-col", "score", "--compare-col", "other",
		"--reader-col", "reader", "--threshold", "0.5", "--bootstrap", "200", "--seed", "4", "--report", rep, "--json"}, &out, &errb)
	if code != exitOK {
		t.Fatalf("exit %d: %s", code, errb.String())
	}
	var got struct {
		N         int            `json:"n"`
		NPositive int            `json:"n_positive"`
		Excluded  map[string]int `json:"excluded"`
		AUC       struct {
			Value float64    `json:"value"`
			CI95  [2]float64 `json:"ci95"`
		} `json:"auc"`
		Compare struct {
			PValue *float64 `json:"p_value"`
		} `json:"compare"`
		OperatingPoint struct {
			Rule      string         `json:"rule"`
			Confusion map[string]int `json:"confusion"`
		} `json:"operating_point"`
		Reader      map[string]any `json:"reader"`
		Calibration map[string]any `json:"calibration"`
		Notice      string         `json:"notice"`
	}
	if err := json.Unmarshal(out.Bytes(), &got); err != nil {
		t.Fatalf("%v\n%s", err, out.String())
	}
	// 10 cases: k has an empty score, z has no label.
	if got.N != 10 || got.NPositive != 5 || got.Excluded["empty_score"] != 1 || got.Excluded["no_label"] != 1 {
		t.Errorf("n %d, positives %d, excluded %v; want 10, 5, 1 empty_score and 1 no_label", got.N, got.NPositive, got.Excluded)
	}
	// Hand count of pairs: of 25 positive-negative pairs the positive
	// scores higher in 19 (a and b beat all five negatives; d, e and j
	// each beat f, g and i).
	if got.AUC.Value != 19.0/25 {
		t.Errorf("AUC %v, want 0.76", got.AUC.Value)
	}
	if c := got.OperatingPoint.Confusion; c["tp"] != 3 || c["fp"] != 2 || c["tn"] != 3 || c["fn"] != 2 || got.OperatingPoint.Rule != "fixed" {
		t.Errorf("operating point %v %v, want tp 3 fp 2 tn 3 fn 2 at rule fixed", got.OperatingPoint.Rule, c)
	}
	if got.Compare.PValue == nil || got.Reader == nil || got.Calibration == nil {
		t.Errorf("missing compare p, reader or calibration: %s", out.String())
	}
	if got.Notice != midsag.Notice {
		t.Errorf("notice %q", got.Notice)
	}
	for _, f := range []string{"report.md", "report.html", "roc.png", "calibration.png", "confusion.png", "decision.png"} {
		b, err := os.ReadFile(filepath.Join(rep, f))
		if err != nil {
			t.Fatal(err)
		}
		if strings.HasPrefix(f, "report") && !strings.Contains(string(b), "RESEARCH USE ONLY") {
			t.Errorf("%s lacks the research-use notice", f)
		}
	}
	html, _ := os.ReadFile(filepath.Join(rep, "report.html"))
	if n := strings.Count(string(html), "data:image/png;base64,"); n != 4 {
		t.Errorf("report.html embeds %d PNGs, want 4", n)
	}
}

// TestEvaluateRefusals checks the stated rules for bad tables: exit 3 with
// reason bad_table naming the line, and no report written.
func TestEvaluateRefusals(t *testing.T) {
	cases := []struct{ name, table, want string }{
		{"non-numeric score", "y,s\n1,0.2\n0,abc\n", "line 3"},
		{"third label", "y,s\n1,0.2\n0,0.3\n2,0.4\n", "third value"},
		{"one class", "y,s\n1,0.2\n1,0.3\n", "AUC undefined"},
		{"missing column", "y,score\n1,0.2\n", `no column "s"`},
		{"infinite score", "y,s\n1,Inf\n0,0.1\n", "not a finite number"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			dir := t.TempDir()
			p := writeTemp(t, dir, "t.csv", c.table)
			var out, errb bytes.Buffer
			code := run(context.Background(), []string{"evaluate", "--table", p, "--score-col", "s", "--label-col", "y",
				"--positive", "1", "--report", filepath.Join(dir, "rep")}, &out, &errb)
			if code != exitRejected || !strings.Contains(errb.String(), "bad_table") || !strings.Contains(errb.String(), c.want) {
				t.Errorf("exit %d, stderr %q; want 3, bad_table and %q", code, errb.String(), c.want)
			}
			if _, err := os.Stat(filepath.Join(dir, "rep")); err == nil {
				t.Errorf("a report folder was written for a refused table")
			}
		})
	}
}

func TestEvaluateUsage(t *testing.T) {
	var out, errb bytes.Buffer
	if code := run(context.Background(), []string{"evaluate", "--table", "x.csv", "--score-col", "s", "--label-col", "y",
		"--positive", "1", "--threshold", "0.5", "--target-sensitivity", "0.9"}, &out, &errb); code != exitUsage {
		t.Errorf("exit %d, want 2 for --threshold with --target-sensitivity", code)
	}
}

// TestEvaluateTimeToEvent runs the verb on six hand-made cases with
// follow-up times and no labels. Hand counts: of the 10 comparable pairs
// (an event before the other's time) the earlier case has the higher risk
// in 8, so Harrell's C is 0.8; the IPCW AUC at 4 is 2.875/3.5 (worked in
// evaluate's TestTimeDependentAUCByHand), with 1 case censored before 4.
func TestEvaluateTimeToEvent(t *testing.T) {
	dir := t.TempDir()
	p := writeTemp(t, dir, "t.csv", "risk,months,event\n0.9,1,1\n0.1,2,0\n0.25,3,1\n0.8,4,1\n0.3,5,0\n0.2,6,1\n,7,1\n")
	rep := filepath.Join(dir, "rep")
	var out, errb bytes.Buffer
	code := run(context.Background(), []string{"evaluate", "--table", p, "--score-col", "risk", "--time-col", "months",
		"--event-col", "event", "--horizon", "4", "--time-unit", "months", "--report", rep, "--json"}, &out, &errb)
	if code != exitOK {
		t.Fatalf("exit %d: %s", code, errb.String())
	}
	var got struct {
		N        int            `json:"n"`
		Excluded map[string]int `json:"excluded"`
		Survival struct {
			Harrell struct {
				C float64 `json:"c"`
			} `json:"harrell_c"`
			TimeAUC []struct {
				AUC            float64 `json:"auc"`
				CensoredBefore int     `json:"censored_before"`
			} `json:"time_auc"`
			LogRank *struct {
				DF int `json:"df"`
			} `json:"log_rank"`
		} `json:"survival"`
	}
	if err := json.Unmarshal(out.Bytes(), &got); err != nil {
		t.Fatalf("%v\n%s", err, out.String())
	}
	if got.N != 6 || got.Excluded["empty_score"] != 1 {
		t.Errorf("n %d excluded %v, want 6 and 1 empty_score", got.N, got.Excluded)
	}
	if got.Survival.Harrell.C != 0.8 {
		t.Errorf("Harrell's C %v, want 0.8", got.Survival.Harrell.C)
	}
	if len(got.Survival.TimeAUC) != 1 || got.Survival.TimeAUC[0].AUC != 2.875/3.5 || got.Survival.TimeAUC[0].CensoredBefore != 1 {
		t.Errorf("time AUC %+v, want 2.875/3.5 with 1 censored before", got.Survival.TimeAUC)
	}
	if got.Survival.LogRank == nil || got.Survival.LogRank.DF != 2 {
		t.Errorf("log-rank %+v, want tertiles on 2 df", got.Survival.LogRank)
	}
	for _, f := range []string{"report.html", "km.png"} {
		if _, err := os.Stat(filepath.Join(rep, f)); err != nil {
			t.Error(err)
		}
	}
}

// TestEvaluateTableMessages: a --positive value that never occurs names
// the values found; a negative time or an event other than 0/1 is refused.
func TestEvaluateTableMessages(t *testing.T) {
	cases := []struct {
		name, table string
		args        []string
		want        string
	}{
		{"positive never occurs", "y,s\n1,0.2\n0,0.3\n", []string{"--label-col", "y", "--positive", "yes"}, `matches none of the values read so far ("1", "0")`},
		{"positive never occurs, one value", "y,s\n1,0.2\n1,0.3\n", []string{"--label-col", "y", "--positive", "yes"}, `positive label "yes" matches no case; the label column holds "1"`},
		{"negative time", "t,e,s\n-1,1,0.2\n", []string{"--time-col", "t", "--event-col", "e"}, "not a finite number ≥ 0"},
		{"event 2", "t,e,s\n1,2,0.2\n", []string{"--time-col", "t", "--event-col", "e"}, "not 0 (censored) or 1"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			p := writeTemp(t, t.TempDir(), "t.csv", c.table)
			var out, errb bytes.Buffer
			code := run(context.Background(), append([]string{"evaluate", "--table", p, "--score-col", "s"}, c.args...), &out, &errb)
			if code != exitRejected || !strings.Contains(errb.String(), c.want) {
				t.Errorf("exit %d, stderr %q; want 3 and %q", code, errb.String(), c.want)
			}
		})
	}
}

// TestEvaluateBatchFlowProvenance evaluates a batch-shaped table (status,
// reason, model_sha256) joined with labels: the flow counts are hand
// counts of the table; the input's sha256 is checked against coreutils'
// sha256sum; the subgroup AUC is a hand count.
func TestEvaluateBatchFlowProvenance(t *testing.T) {
	dir := t.TempDir()
	table := "study_instance_uid,status,reason,calibrated_probability,model_sha256,site\n" +
		"a,scored,,0.9,m1,north\nb,scored,,0.8,m1,north\nc,scored,,0.3,m1,north\nd,scored,,0.2,m1,north\n" +
		"e,scored,,0.7,m1,south\nf,scored,,0.6,m1,south\ng,scored,,0.65,m1,south\n" +
		"h,rejected,no_sagittal_series,,,north\ni,rejected,no_sagittal_series,,,south\nj,failed,io_error,,,south\n" +
		"k,scored,,0.5,m1,south\n"
	labels := "study_instance_uid,y\na,1\nb,1\nc,0\nd,0\ne,1\nf,0\ng,0\nh,1\ni,0\nj,1\n"
	tp, lp := writeTemp(t, dir, "results.csv", table), writeTemp(t, dir, "labels.csv", labels)
	rep := filepath.Join(dir, "rep")
	var out, errb bytes.Buffer
	code := run(context.Background(), []string{"evaluate", "--table", tp, "--labels", lp, "--id-col", "study_instance_uid",
		"--label-col", "y", "--positive", "1", "--score-col", "calibrated_probability", "--subgroup", "site",
		"--report", rep, "--json"}, &out, &errb)
	if code != exitOK {
		t.Fatalf("exit %d: %s", code, errb.String())
	}
	var got struct {
		Flow []struct {
			Step   string `json:"step"`
			N      int    `json:"n"`
			Detail string `json:"detail"`
		} `json:"flow"`
		Subgroups []struct {
			Value string `json:"value"`
			N     int    `json:"n"`
			AUC   *struct {
				Value float64 `json:"value"`
			} `json:"auc"`
		} `json:"subgroups"`
		Provenance struct {
			Inputs []struct {
				Path   string `json:"path"`
				SHA256 string `json:"sha256"`
			} `json:"inputs"`
			Models  []string `json:"models"`
			Command []string `json:"command_line"`
			Date    string   `json:"date"`
		} `json:"provenance"`
	}
	if err := json.Unmarshal(out.Bytes(), &got); err != nil {
		t.Fatalf("%v\n%s", err, out.String())
	}
	// 11 rows; 3 not scored (2 rejected no_sagittal_series, 1 failed);
	// 8 scored, of which k has no label; 7 analysed, 3 positive.
	want := []int{11, 3, 8, 1, 0, 7, 3, 4}
	if len(got.Flow) != len(want) {
		t.Fatalf("flow %+v, want %d steps", got.Flow, len(want))
	}
	for i, w := range want {
		if got.Flow[i].N != w {
			t.Errorf("flow step %q: %d, want %d", got.Flow[i].Step, got.Flow[i].N, w)
		}
	}
	if !strings.Contains(got.Flow[1].Detail, "rejected: no_sagittal_series 2") || !strings.Contains(got.Flow[1].Detail, "failed: io_error 1") {
		t.Errorf("not-scored detail %q", got.Flow[1].Detail)
	}
	// north: a, b positive over c, d: AUC 1. south: e (0.7) against f
	// (0.6) and g (0.65): AUC 1; both have two classes.
	if len(got.Subgroups) != 2 || got.Subgroups[0].Value != "north" || got.Subgroups[0].N != 4 || got.Subgroups[0].AUC == nil || got.Subgroups[0].AUC.Value != 1 {
		t.Errorf("subgroups %+v", got.Subgroups)
	}
	sum := strings.Fields(string(testtool.Run(t, "sha256sum", tp)))[0]
	if len(got.Provenance.Inputs) != 2 || got.Provenance.Inputs[0].SHA256 != sum {
		t.Errorf("provenance inputs %+v, want the table's sha256sum %s first", got.Provenance.Inputs, sum)
	}
	if len(got.Provenance.Models) != 1 || got.Provenance.Models[0] != "m1" || got.Provenance.Date == "" || got.Provenance.Command[1] != "evaluate" {
		t.Errorf("provenance %+v", got.Provenance)
	}
	html, err := os.ReadFile(filepath.Join(rep, "report.html"))
	if err != nil {
		t.Fatal(err)
	}
	for _, s := range []string{"STARD 2015", sum, "Subgroups", "optimistic"} {
		if !strings.Contains(string(html), s) {
			t.Errorf("report.html lacks %q", s)
		}
	}
}
