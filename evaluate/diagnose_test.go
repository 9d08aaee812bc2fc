package evaluate

import (
	"encoding/json"
	"math"
	"os"
	"strconv"
	"testing"

	"github.com/midsag/midsag/internal/testtool"
)

// calibTable reads the fixed 200-row table of package models' calibration
// tests and the scikit-learn 1.2.1 numbers recorded for it
// (models/testdata/calib/make_reference.py).
func calibTable(t *testing.T) (prob []float64, pos []bool, ref struct {
	Diagnostics struct {
		Brier   float64 `json:"brier"`
		LogLoss float64 `json:"log_loss"`
	} `json:"diagnostics"`
}) {
	t.Helper()
	for _, r := range testtool.ReadCSV(t, "../models/testdata/calib/table.csv")[1:] {
		p, err := strconv.ParseFloat(r[2], 64)
		if err != nil {
			t.Fatalf("bad row %q", r)
		}
		prob, pos = append(prob, p), append(pos, r[3] == "pos")
	}
	b, err := os.ReadFile("../models/testdata/calib/reference.json")
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, &ref); err != nil {
		t.Fatal(err)
	}
	return prob, pos, ref
}

// TestDiagnosticsMatchSklearn compares Brier score and NLL with
// scikit-learn 1.2.1's brier_score_loss and log_loss on the prob column,
// to 1e-12 (the same sums in float64).
func TestDiagnosticsMatchSklearn(t *testing.T) {
	prob, pos, ref := calibTable(t)
	d := Diagnose(prob, pos)
	if math.Abs(d.Brier-ref.Diagnostics.Brier) > 1e-12 || math.Abs(d.NLL-ref.Diagnostics.LogLoss) > 1e-12 {
		t.Errorf("Brier %.15f NLL %.15f, sklearn %.15f %.15f", d.Brier, d.NLL, ref.Diagnostics.Brier, ref.Diagnostics.LogLoss)
	}
}

// TestECEHandWorked checks ECE (Naeini et al. 2015; Guo et al. 2017 eq. 3)
// with 10 equal-width bins on ten rows worked by hand:
//
//	bin [0.0,0.1): 0.05 (0), 0.05 (0)      mean p 0.05, mean y 0   gap 0.05, weight 2/10
//	bin [0.3,0.4): 0.35 (1)                mean p 0.35, mean y 1   gap 0.65, weight 1/10
//	bin [0.6,0.7): 0.6 (1), 0.6 (0), 0.6 (1) 0.6 vs 2/3            gap 1/15, weight 3/10
//	bin [0.9,1.0]: 0.9 (1), 0.95 (1), 1.0 (1), 0.95 (0)  0.95 vs 0.75 gap 0.2, weight 4/10
//
// ECE = 0.01 + 0.065 + 0.02 + 0.08 = 0.175. 0.6 sits on a bin edge and
// goes up; 1.0 goes into the last bin.
func TestECEHandWorked(t *testing.T) {
	p := []float64{0.05, 0.05, 0.35, 0.6, 0.6, 0.6, 0.9, 0.95, 1.0, 0.95}
	y := []bool{false, false, true, true, false, true, true, true, true, false}
	if got := ECE(p, y); math.Abs(got-0.175) > 1e-12 {
		t.Errorf("ECE = %.15f, want 0.175", got)
	}
}
