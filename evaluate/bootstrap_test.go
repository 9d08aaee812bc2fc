package evaluate

import (
	"math"
	"testing"
)

// TestBootstrapNearDeLongOnASAH: on pROC's aSAH s100b (R pROC 1.18.0,
// testdata/asah_reference.json), the stratified bootstrap percentile
// interval of the AUC should lie close to the DeLong interval pROC reports;
// 0.03 per end is the tolerance (common practice for 2000 replicates, not a
// published figure). The same seed must give the same interval.
func TestBootstrapNearDeLongOnASAH(t *testing.T) {
	var ref asahReference
	loadJSON(t, "asah_reference.json", &ref)
	tab := readTestTable(t, "asah.csv", Columns{Score: "s100b", Label: "outcome", Positive: "Poor"})
	b1, band := Bootstrap(tab.Scores, tab.Labels, 0.2, 2000, 42)
	b2, _ := Bootstrap(tab.Scores, tab.Labels, 0.2, 2000, 42)
	if b1 != b2 {
		t.Fatalf("same seed, different results: %v vs %v", b1, b2)
	}
	for i := range 2 {
		if math.Abs(b1.AUC[i]-ref.S100b.CI95[i]) > 0.03 {
			t.Errorf("bootstrap AUC interval %v, pROC DeLong %v", b1.AUC, ref.S100b.CI95)
		}
	}
	if len(band.FPR) != bandGrid+1 || band.Lo[0] > band.Hi[0] || band.Hi[bandGrid] != 1 {
		t.Errorf("band malformed: %d points, first [%g, %g], last high %g", len(band.FPR), band.Lo[0], band.Hi[0], band.Hi[bandGrid])
	}
}
