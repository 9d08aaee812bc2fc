package evaluate

import (
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"github.com/midsag/midsag/internal/testtool"
)

// rscript is Debian's R front end; the survival, pROC and psych packages
// come from r-cran-survival, r-cran-proc and r-cran-psych.
const rscript = "/usr/bin/Rscript"

// runR runs an R script in dir with the given packages loaded, skipping
// (or, with MIDSAG_REQUIRE_TOOLS=1, failing) when R or a package is
// missing. The script prints "key v1 v2 ..." lines; runR returns them by
// key.
func runR(t *testing.T, dir, script string, packages ...string) map[string][]float64 {
	t.Helper()
	var load strings.Builder
	for _, p := range packages {
		load.WriteString("suppressMessages(library(" + p + "))\n")
	}
	check := exec.Command(rscript, "-e", load.String())
	testtool.Need(t, check.Run() == nil, rscript+" with R packages "+strings.Join(packages, ", ")+" (Debian r-cran-*)")
	path := filepath.Join(dir, "ref.R")
	if err := os.WriteFile(path, []byte(load.String()+script), 0o644); err != nil {
		t.Fatal(err)
	}
	cmd := exec.Command(rscript, path)
	cmd.Dir = dir
	out, err := cmd.CombinedOutput()
	if err != nil {
		t.Fatalf("Rscript: %v\n%s", err, out)
	}
	ref := map[string][]float64{}
	for _, line := range strings.Split(string(out), "\n") {
		f := strings.Fields(line)
		if len(f) < 2 {
			continue
		}
		var vals []float64
		for _, s := range f[1:] {
			v, err := strconv.ParseFloat(s, 64)
			if s == "NA" {
				v, err = nan, nil
			}
			if err != nil {
				t.Fatalf("R printed %q: %v", line, err)
			}
			vals = append(vals, v)
		}
		ref[f[0]] = vals
	}
	return ref
}

// refValue returns one value R printed under key, failing when absent.
func refValue(t *testing.T, ref map[string][]float64, key string) []float64 {
	t.Helper()
	v, ok := ref[key]
	if !ok {
		t.Fatalf("R printed no %q", key)
	}
	return v
}
