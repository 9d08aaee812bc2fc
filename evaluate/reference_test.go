package evaluate

import (
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

func loadJSON(t *testing.T, name string, v any) {
	t.Helper()
	b, err := os.ReadFile(filepath.Join("testdata", name))
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, v); err != nil {
		t.Fatalf("%s: %v", name, err)
	}
}

func near(t *testing.T, what string, got, want, tol float64) {
	t.Helper()
	if math.Abs(got-want) > tol {
		t.Errorf("%s = %.12g, want %.12g (±%g)", what, got, want, tol)
	}
}

func readTestTable(t *testing.T, name string, cols Columns) *Table {
	t.Helper()
	f, err := os.Open(filepath.Join("testdata", name))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	tab, err := ReadTable(f, name, nil, "", cols)
	if err != nil {
		t.Fatal(err)
	}
	return tab
}

// TestHanleyMcNeil1982 checks the five-point rating example of Hanley and
// McNeil 1982 (Radiology 143:29-36, table 1; counts from memory, confirmed
// by reproducing the published AUC): 58 normal cases rated 1..5 as
// 33, 6, 6, 11, 2 and 51 abnormal ones as 3, 2, 2, 11, 33. Published: area
// 0.893, SE 0.032. Their SE comes from their exponential approximation, not
// DeLong's; the two differ here by under 0.002, the tolerance used.
func TestHanleyMcNeil1982(t *testing.T) {
	normal := []int{33, 6, 6, 11, 2}
	abnormal := []int{3, 2, 2, 11, 33}
	var scores []float64
	var labels []bool
	for rating := range 5 {
		for range normal[rating] {
			scores, labels = append(scores, float64(rating+1)), append(labels, false)
		}
		for range abnormal[rating] {
			scores, labels = append(scores, float64(rating+1)), append(labels, true)
		}
	}
	r, err := DeLong(scores, labels)
	if err != nil {
		t.Fatal(err)
	}
	near(t, "AUC (published 0.893)", r.Value, 0.893, 0.0005)
	near(t, "SE (published 0.032)", r.SE, 0.032, 0.002)
}

// asahReference is testdata/asah_reference.json, written by R pROC 1.18.0
// (testdata/asah_reference.R).
type asahReference struct {
	Tool  string `json:"tool"`
	N     int    `json:"n"`
	NPos  int    `json:"n_positive"`
	S100b struct {
		AUC  float64    `json:"auc"`
		CI95 [2]float64 `json:"ci95"`
	} `json:"s100b"`
	NDKA struct {
		AUC  float64    `json:"auc"`
		CI95 [2]float64 `json:"ci95"`
	} `json:"ndka"`
	Paired struct {
		Z float64 `json:"z"`
		P float64 `json:"p_value"`
	} `json:"paired_delong"`
}

// TestPROCaSAH compares with R pROC 1.18.0 on its aSAH data (outcome Poor
// vs Good): roc(..., levels=c("Good","Poor"), direction="<"),
// ci.auc(method="delong") for s100b and ndka, and roc.test(r1, r2,
// method="delong", paired=TRUE). Tolerance 1e-6.
func TestPROCaSAH(t *testing.T) {
	var ref asahReference
	loadJSON(t, "asah_reference.json", &ref)
	tab := readTestTable(t, "asah.csv", Columns{Score: "s100b", Label: "outcome", Positive: "Poor", Compare: "ndka"})
	if len(tab.Labels) != ref.N {
		t.Fatalf("read %d cases, pROC has %d", len(tab.Labels), ref.N)
	}
	s100b, err := DeLong(tab.Scores, tab.Labels)
	if err != nil {
		t.Fatal(err)
	}
	ndka, err := DeLong(tab.Compare, tab.Labels)
	if err != nil {
		t.Fatal(err)
	}
	const tol = 1e-6
	near(t, "s100b AUC", s100b.Value, ref.S100b.AUC, tol)
	near(t, "s100b CI low", s100b.CI95[0], ref.S100b.CI95[0], tol)
	near(t, "s100b CI high", s100b.CI95[1], ref.S100b.CI95[1], tol)
	near(t, "ndka AUC", ndka.Value, ref.NDKA.AUC, tol)
	near(t, "ndka CI low", ndka.CI95[0], ref.NDKA.CI95[0], tol)
	near(t, "ndka CI high", ndka.CI95[1], ref.NDKA.CI95[1], tol)
	c, err := Compare(tab.Scores, tab.Compare, tab.Labels)
	if err != nil {
		t.Fatal(err)
	}
	near(t, "paired DeLong z", c.Z, ref.Paired.Z, tol)
	near(t, "paired DeLong p", c.P, ref.Paired.P, tol)
}

// pythonReference is testdata/python_reference.json, written by
// statsmodels 0.13.5 and scikit-learn 1.2.1 (testdata/python_reference.py).
type pythonReference struct {
	Wilson struct {
		Cases []struct {
			K, N int
			CI95 [2]float64 `json:"ci95"`
		} `json:"cases"`
	} `json:"wilson"`
	McNemar struct {
		Cases []struct {
			Table [2][2]int `json:"table"`
			P     float64   `json:"p_value"`
		} `json:"cases"`
	} `json:"mcnemar"`
	Sklearn struct {
		Brier float64 `json:"brier"`
		AUC   float64 `json:"auc"`
		ROC   struct {
			FPR        []float64  `json:"fpr"`
			TPR        []float64  `json:"tpr"`
			Thresholds []*float64 `json:"thresholds"`
		} `json:"roc"`
	} `json:"sklearn"`
	Calibration struct {
		Slope     float64 `json:"slope"`
		Intercept float64 `json:"intercept"`
	} `json:"calibration"`
}

// TestStatsmodelsWilson compares with statsmodels 0.13.5
// proportion_confint(k, n, alpha=0.05, method="wilson"), k = 0 and k = n
// included. Tolerance 1e-12.
func TestStatsmodelsWilson(t *testing.T) {
	var ref pythonReference
	loadJSON(t, "python_reference.json", &ref)
	if len(ref.Wilson.Cases) == 0 {
		t.Fatal("no Wilson cases in the reference")
	}
	for _, c := range ref.Wilson.Cases {
		w := Wilson(c.K, c.N)
		near(t, "Wilson low", w.CI95[0], c.CI95[0], 1e-12)
		near(t, "Wilson high", w.CI95[1], c.CI95[1], 1e-12)
	}
}

// TestStatsmodelsMcNemar compares with statsmodels 0.13.5
// mcnemar(table, exact=True).pvalue; b and c are the off-diagonal cells.
// Tolerance 1e-12.
func TestStatsmodelsMcNemar(t *testing.T) {
	var ref pythonReference
	loadJSON(t, "python_reference.json", &ref)
	for _, c := range ref.McNemar.Cases {
		p, err := McNemar(c.Table[0][1], c.Table[1][0])
		if err != nil {
			t.Fatal(err)
		}
		near(t, "McNemar exact p", p, c.P, 1e-12)
	}
}

// TestSklearnSmallTable compares with scikit-learn 1.2.1 on
// testdata/small.csv: brier_score_loss, roc_auc_score and
// roc_curve(drop_intermediate=False). Tolerance 1e-12.
func TestSklearnSmallTable(t *testing.T) {
	var ref pythonReference
	loadJSON(t, "python_reference.json", &ref)
	tab := readTestTable(t, "small.csv", Columns{Score: "prob", Label: "label", Positive: "1"})
	near(t, "Brier", Brier(tab.Scores, tab.Labels), ref.Sklearn.Brier, 1e-12)
	auc, err := AUC(tab.Scores, tab.Labels)
	if err != nil {
		t.Fatal(err)
	}
	near(t, "AUC", auc, ref.Sklearn.AUC, 1e-12)
	pts, err := ROC(tab.Scores, tab.Labels)
	if err != nil {
		t.Fatal(err)
	}
	if len(pts) != len(ref.Sklearn.ROC.FPR) {
		t.Fatalf("%d ROC points, scikit-learn has %d", len(pts), len(ref.Sklearn.ROC.FPR))
	}
	for i, p := range pts {
		near(t, "FPR", p.FPR, ref.Sklearn.ROC.FPR[i], 1e-12)
		near(t, "TPR", p.TPR, ref.Sklearn.ROC.TPR[i], 1e-12)
		if i == 0 {
			// scikit-learn 1.2 labels the (0, 0) point max(score)+1; we use
			// +Inf (as scikit-learn does from 1.3): same point, other name.
			if !math.IsInf(p.Threshold, 1) {
				t.Errorf("first ROC point threshold %g, want +Inf", p.Threshold)
			}
			continue
		}
		near(t, "threshold", p.Threshold, *ref.Sklearn.ROC.Thresholds[i], 1e-12)
	}
}

// TestStatsmodelsCalibrationFit compares the Cox (1958) recalibration fit
// with statsmodels 0.13.5 GLM(Binomial) on testdata/small.csv: the slope of
// y ~ 1 + logit(p), the intercept of y ~ 1 with offset logit(p).
// Tolerance 1e-8.
func TestStatsmodelsCalibrationFit(t *testing.T) {
	var ref pythonReference
	loadJSON(t, "python_reference.json", &ref)
	tab := readTestTable(t, "small.csv", Columns{Score: "prob", Label: "label", Positive: "1"})
	a, b, err := CalibrationFit(tab.Scores, tab.Labels)
	if err != nil {
		t.Fatal(err)
	}
	near(t, "calibration intercept", a, ref.Calibration.Intercept, 1e-8)
	near(t, "calibration slope", b, ref.Calibration.Slope, 1e-8)
}

// The tests below check stated results rather than an outside reference.

func TestOneClassIsRefused(t *testing.T) {
	_, err := Run(&Table{Labels: []bool{true, true}, Scores: []float64{0.2, 0.4}}, "1", Options{})
	if err == nil || !strings.Contains(err.Error(), "AUC undefined") {
		t.Fatalf("err = %v, want AUC undefined", err)
	}
}

// TestTiesEverywhere: every score tied gives AUC 0.5 with a zero-width
// interval, a warning, and an undefined paired test against itself.
func TestTiesEverywhere(t *testing.T) {
	tab := &Table{Labels: []bool{true, false, true, false, true, false, true, false, true, false, false},
		Scores: []float64{3, 3, 3, 3, 3, 3, 3, 3, 3, 3, 3}, Excluded: map[string]int{}}
	tab.Compare = tab.Scores
	s, err := Run(tab, "1", Options{})
	if err != nil {
		t.Fatal(err)
	}
	if s.AUC.Value != 0.5 || s.AUC.CI95 != (Interval{0.5, 0.5}) {
		t.Errorf("AUC %v %v, want 0.5 [0.5, 0.5]", s.AUC.Value, s.AUC.CI95)
	}
	if s.Compare.PValue != nil {
		t.Errorf("paired test on identical constant scores gave p %v, want undefined", *s.Compare.PValue)
	}
	if s.Calibration != nil {
		t.Errorf("scores of 3 treated as probabilities")
	}
	if !hasWarning(s, "constant") {
		t.Errorf("no constant-score warning in %q", s.Warnings)
	}
}

func TestFewCasesWarn(t *testing.T) {
	s, err := Run(&Table{Labels: []bool{true, false, true}, Scores: []float64{0.9, 0.1, 0.4}}, "1", Options{})
	if err != nil {
		t.Fatal(err)
	}
	if !hasWarning(s, "only 3 cases") {
		t.Errorf("no small-sample warning in %q", s.Warnings)
	}
}

func hasWarning(s *Summary, part string) bool {
	for _, w := range s.Warnings {
		if strings.Contains(w, part) {
			return true
		}
	}
	return false
}
