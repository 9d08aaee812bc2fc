package evaluate

import (
	"math"
	"path/filepath"
	"strconv"
	"testing"

	"github.com/midsag/midsag/internal/testtool"
)

var nan = math.NaN()

// survData is cases exported by R: time, event (0/1) and named columns.
type survData struct {
	time  []float64
	event []bool
	col   map[string][]float64
}

func readSurv(t *testing.T, path string) survData {
	t.Helper()
	recs := testtool.ReadCSV(t, path)
	d := survData{col: map[string][]float64{}}
	for _, r := range recs[1:] {
		for i, h := range recs[0] {
			v, err := strconv.ParseFloat(r[i], 64)
			if err != nil {
				t.Fatalf("%s: %q: %v", path, r[i], err)
			}
			switch h {
			case "time":
				d.time = append(d.time, v)
			case "status":
				d.event = append(d.event, v == 1)
			default:
				d.col[h] = append(d.col[h], v)
			}
		}
	}
	return d
}

func negate(x []float64) []float64 {
	out := make([]float64, len(x))
	for i, v := range x {
		out[i] = -v
	}
	return out
}

// TestRSurvivalConcordance compares Harrell's and Uno's C with R survival's
// concordance() on the package's lung data (complete cases of time,
// status, age, sex, ph.karno; status recoded 0/1) and veteran data:
// timewt = "n" is Harrell's C, timewt = "n/G2" Uno's, ymax the truncation
// time, reverse = TRUE because a higher risk score means an earlier event.
// Tolerance 1e-10.
func TestRSurvivalConcordance(t *testing.T) {
	dir := t.TempDir()
	ref := runR(t, dir, `
d <- lung[, c("time","status","age","sex","ph.karno")]
d <- d[complete.cases(d),]; d$status <- d$status - 1
write.csv(d, "lung.csv", row.names=FALSE)
v <- veteran[, c("time","status","karno")]
write.csv(v, "veteran.csv", row.names=FALSE)
k <- function(f, data, w, ...) concordance(f, data=data, timewt=w, reverse=TRUE, ...)$concordance
cat("lung_age_n", sprintf("%.15g", k(Surv(time, status) ~ age, d, "n")), "\n")
cat("lung_age_nG2_700", sprintf("%.15g", k(Surv(time, status) ~ age, d, "n/G2", ymax=700)), "\n")
cat("lung_karno_nG2", sprintf("%.15g", k(Surv(time, status) ~ I(-ph.karno), d, "n/G2")), "\n")
cat("lung_karno_n_365", sprintf("%.15g", k(Surv(time, status) ~ I(-ph.karno), d, "n", ymax=365)), "\n")
cat("vet_karno_n", sprintf("%.15g", k(Surv(time, status) ~ I(-karno), v, "n")), "\n")
cat("vet_karno_nG2_200", sprintf("%.15g", k(Surv(time, status) ~ I(-karno), v, "n/G2", ymax=200)), "\n")
`, "survival")
	lung := readSurv(t, filepath.Join(dir, "lung.csv"))
	vet := readSurv(t, filepath.Join(dir, "veteran.csv"))
	inf := math.Inf(1)
	for _, c := range []struct {
		key  string
		d    survData
		risk []float64
		uno  bool
		tau  float64
	}{
		{"lung_age_n", lung, lung.col["age"], false, inf},
		{"lung_age_nG2_700", lung, lung.col["age"], true, 700},
		{"lung_karno_nG2", lung, negate(lung.col["ph.karno"]), true, inf},
		{"lung_karno_n_365", lung, negate(lung.col["ph.karno"]), false, 365},
		{"vet_karno_n", vet, negate(vet.col["karno"]), false, inf},
		{"vet_karno_nG2_200", vet, negate(vet.col["karno"]), true, 200},
	} {
		var got Concordance
		if c.uno {
			got = UnoC(c.risk, c.d.time, c.d.event, c.tau)
		} else {
			got = HarrellC(c.risk, c.d.time, c.d.event, c.tau)
		}
		near(t, c.key, got.C, refValue(t, ref, c.key)[0], 1e-10)
	}
}

// TestRSurvivalKaplanMeierLogRank compares the Kaplan–Meier steps (time,
// number at risk, estimate, log-Greenwood interval) with R survival's
// survfit(conf.type = "log") and the log-rank test with survdiff, on lung
// by sex (two groups) and veteran by cell type (four groups, 3 df).
// Tolerance 1e-10.
func TestRSurvivalKaplanMeierLogRank(t *testing.T) {
	dir := t.TempDir()
	ref := runR(t, dir, `
d <- lung[, c("time","status","sex")]; d$status <- d$status - 1
write.csv(d, "lung.csv", row.names=FALSE)
v <- veteran[, c("time","status")]; v$cell <- as.integer(veteran$celltype) - 1
write.csv(v, "veteran.csv", row.names=FALSE)
f <- survfit(Surv(time, status) ~ 1, data=d, conf.type="log")
p <- function(k, x) cat(k, sprintf("%.15g", x), "\n")
p("km_time", f$time); p("km_risk", f$n.risk); p("km_surv", f$surv); p("km_lo", f$lower); p("km_hi", f$upper)
s1 <- survdiff(Surv(time, status) ~ sex, data=d)
p("lr_lung", c(s1$chisq, s1$obs, s1$exp, pchisq(s1$chisq, 1, lower.tail=FALSE)))
s2 <- survdiff(Surv(time, status) ~ cell, data=v)
p("lr_vet", c(s2$chisq, s2$obs, s2$exp, pchisq(s2$chisq, 3, lower.tail=FALSE)))
`, "survival")
	lung := readSurv(t, filepath.Join(dir, "lung.csv"))
	km := KaplanMeier(lung.time, lung.event)
	times := refValue(t, ref, "km_time")
	if len(km) != len(times) {
		t.Fatalf("%d Kaplan–Meier steps, survfit has %d", len(km), len(times))
	}
	risk, surv := refValue(t, ref, "km_risk"), refValue(t, ref, "km_surv")
	lo, hi := refValue(t, ref, "km_lo"), refValue(t, ref, "km_hi")
	for i, st := range km {
		near(t, "time", st.Time, times[i], 0)
		near(t, "n.risk", float64(st.NRisk), risk[i], 0)
		near(t, "surv", st.Surv, surv[i], 1e-10)
		if !math.IsNaN(lo[i]) {
			near(t, "lower", st.CI95[0], lo[i], 1e-10)
			near(t, "upper", st.CI95[1], hi[i], 1e-10)
		}
	}
	groups := func(x []float64) []int {
		g := make([]int, len(x))
		for i, v := range x {
			g[i] = int(v)
		}
		return g
	}
	sex := groups(lung.col["sex"])
	for i := range sex {
		sex[i]-- // R's sex is 1 or 2
	}
	lr, err := LogRankTest(sex, []string{"male", "female"}, lung.time, lung.event)
	if err != nil {
		t.Fatal(err)
	}
	want := refValue(t, ref, "lr_lung")
	near(t, "lung chisq", lr.ChiSq, want[0], 1e-10)
	near(t, "lung observed male", lr.Observed[0], want[1], 0)
	near(t, "lung expected male", lr.Expected[0], want[3], 1e-10)
	near(t, "lung p", lr.PValue, want[5], 1e-12)
	vet := readSurv(t, filepath.Join(dir, "veteran.csv"))
	lr, err = LogRankTest(groups(vet.col["cell"]), []string{"squamous", "smallcell", "adeno", "large"}, vet.time, vet.event)
	if err != nil {
		t.Fatal(err)
	}
	want = refValue(t, ref, "lr_vet")
	near(t, "veteran chisq (3 df)", lr.ChiSq, want[0], 1e-10)
	for g := range 4 {
		near(t, "veteran expected", lr.Expected[g], want[5+g], 1e-10)
	}
	near(t, "veteran p", lr.PValue, want[9], 1e-12)
}

// TestKaplanMeierAMLByHand works the product-limit estimate by hand for the
// maintained arm of R survival's aml data (11 patients; weeks to relapse,
// + censored: 9, 13, 13+, 18, 23, 28+, 31, 34, 45+, 48, 161+; the data set
// R documents as from Miller's "Survival Analysis"). Worked by hand: 11 at
// risk at 9, S = 10/11; at 13, 10 at risk and 1 relapse (the 13+ stays at
// risk), ·9/10; at 18, 8 at risk, ·7/8; at 23 ·6/7; at 31 (5 at risk) ·4/5;
// at 34 ·3/4; at 48 (2 at risk) ·1/2, so S(48) = 81/440 = 0.18409. The test
// also asks survfit for the same steps.
func TestKaplanMeierAMLByHand(t *testing.T) {
	time := []float64{9, 13, 13, 18, 23, 28, 31, 34, 45, 48, 161}
	event := []bool{true, true, false, true, true, false, true, true, false, true, false}
	s := 10.0 / 11
	hand := map[float64]float64{9: s}
	for _, f := range []struct{ t, factor float64 }{{13, 9.0 / 10}, {18, 7.0 / 8}, {23, 6.0 / 7}, {31, 4.0 / 5}, {34, 3.0 / 4}, {48, 1.0 / 2}} {
		s *= f.factor
		hand[f.t] = s
	}
	km := KaplanMeier(time, event)
	for _, st := range km {
		if want, ok := hand[st.Time]; ok {
			near(t, "S("+strconv.FormatFloat(st.Time, 'g', -1, 64)+")", st.Surv, want, 1e-15)
		}
	}
	near(t, "S(48) = 81/440", SurvAt(km, 48, false), 81.0/440, 1e-15)
	ref := runR(t, t.TempDir(), `
f <- survfit(Surv(time, status) ~ 1, data=aml[aml$x == "Maintained",])
cat("aml", sprintf("%.15g", summary(f, times=c(9,13,18,23,31,34,48))$surv), "\n")
`, "survival")
	for i, x := range []float64{9, 13, 18, 23, 31, 34, 48} {
		near(t, "survfit aml", SurvAt(km, x, false), refValue(t, ref, "aml")[i], 1e-12)
	}
}

// TestTimeDependentAUCNoCensoringIsPROC: before the first censoring every
// IPCW weight is 1, so the cumulative/dynamic AUC at such a horizon is the
// ordinary AUC of "event by the horizon" against "followed past it". Checked
// against R pROC's auc() on R survival's veteran data (first censoring at
// day 25) with risk −karno at day 20. Tolerance 1e-12.
func TestTimeDependentAUCNoCensoringIsPROC(t *testing.T) {
	dir := t.TempDir()
	ref := runR(t, dir, `
v <- veteran[, c("time","status","karno")]
write.csv(v, "veteran.csv", row.names=FALSE)
y <- as.integer(v$time <= 20)
cat("auc20", sprintf("%.15g", as.numeric(auc(roc(y, -v$karno, levels=c(0,1), direction="<", quiet=TRUE)))), "\n")
`, "survival", "pROC")
	vet := readSurv(t, filepath.Join(dir, "veteran.csv"))
	got, err := TimeDependentAUC(negate(vet.col["karno"]), vet.time, vet.event, 20)
	if err != nil {
		t.Fatal(err)
	}
	if got.CensoredBefore != 0 {
		t.Fatalf("%d censored before day 20; the check needs none", got.CensoredBefore)
	}
	near(t, "AUC(20) vs pROC", got.AUC, refValue(t, ref, "auc20")[0], 1e-12)
}

// TestTimeDependentAUCByHand works Uno et al. 2007's IPCW estimator by hand
// on six cases (time, event, risk): (1,1,0.9) (2,0,0.1) (3,1,0.25)
// (4,1,0.8) (5,0,0.3) (6,1,0.2), horizon 4. Censoring KM: G = 1 until the
// censoring at 2, where 5 remain at risk of censoring, so G(t) = 4/5 from
// 2 on. Cases by 4: times 1, 3, 4 with weights 1/G(T−) = 1, 5/4, 5/4.
// Controls (T > 4): risks 0.3 and 0.2. The cases at 1 and 4 outscore both
// controls, the case at 3 one of two, so
// AUC = (1·1 + 5/4·1/2 + 5/4·1)/(1 + 5/4 + 5/4) = 2.875/3.5.
func TestTimeDependentAUCByHand(t *testing.T) {
	time := []float64{1, 2, 3, 4, 5, 6}
	event := []bool{true, false, true, true, false, true}
	risk := []float64{0.9, 0.1, 0.25, 0.8, 0.3, 0.2}
	got, err := TimeDependentAUC(risk, time, event, 4)
	if err != nil {
		t.Fatal(err)
	}
	near(t, "AUC(4)", got.AUC, 2.875/3.5, 1e-15)
	if got.Cases != 3 || got.Controls != 2 || got.CensoredBefore != 1 {
		t.Errorf("cases %d controls %d censored %d, want 3 2 1", got.Cases, got.Controls, got.CensoredBefore)
	}
	if _, err := TimeDependentAUC(risk, time, event, 0.5); err == nil {
		t.Error("a horizon before the first event gave an AUC")
	}
}
