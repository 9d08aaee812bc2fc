package midsag_test

import (
	"bufio"
	"os"
	"os/exec"
	"regexp"
	"slices"
	"strings"
	"testing"
)

// module is this repository's module path; the import table names
// packages relative to it ("midsag" for the root).
const module = "github.com/midsag/midsag"

// TestArchitectureImports checks docs/ARCHITECTURE.md's import table
// against the packages `go list` reports (non-test imports only): every
// package has a row, and each row lists exactly the project packages it
// imports. An import that is not in the table fails, and so does an arrow
// the table allows but the code no longer has, so the document stays true.
func TestArchitectureImports(t *testing.T) {
	allowed := readImportTable(t, "docs/ARCHITECTURE.md")
	out, err := exec.Command("go", "list", "-f", "{{.ImportPath}}{{range .Imports}} {{.}}{{end}}", "./...").Output()
	if err != nil {
		t.Fatalf("go list: %v", err)
	}
	seen := map[string]bool{}
	for _, line := range strings.Split(strings.TrimSpace(string(out)), "\n") {
		f := strings.Fields(line)
		pkg := rel(f[0])
		seen[pkg] = true
		var got []string
		for _, imp := range f[1:] {
			if imp == module || strings.HasPrefix(imp, module+"/") {
				got = append(got, rel(imp))
			}
		}
		slices.Sort(got)
		want, ok := allowed[pkg]
		if !ok {
			t.Errorf("package %s is not in the import table of docs/ARCHITECTURE.md (it imports %v)", pkg, got)
			continue
		}
		if !slices.Equal(got, want) {
			t.Errorf("package %s imports %v; docs/ARCHITECTURE.md says %v", pkg, got, want)
		}
	}
	for pkg := range allowed {
		if !seen[pkg] {
			t.Errorf("docs/ARCHITECTURE.md lists %s, which go list does not report", pkg)
		}
	}
}

// rel names a package relative to the module, "midsag" for the root.
func rel(path string) string {
	if path == module {
		return "midsag"
	}
	return strings.TrimPrefix(path, module+"/")
}

// readImportTable reads the table rows "| `pkg` | `a`, `b` |" that follow
// the heading "## Packages and their imports"; "—" means none.
func readImportTable(t *testing.T, path string) map[string][]string {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	row := regexp.MustCompile("^\\| `([^`]+)` \\|([^|]*)\\|")
	name := regexp.MustCompile("`([^`]+)`")
	table := map[string][]string{}
	in := false
	sc := bufio.NewScanner(f)
	for sc.Scan() {
		line := sc.Text()
		if strings.HasPrefix(line, "## ") {
			in = strings.HasPrefix(line, "## Packages and their imports")
			continue
		}
		m := row.FindStringSubmatch(line)
		if !in || m == nil {
			continue
		}
		imports := []string{}
		for _, n := range name.FindAllStringSubmatch(m[2], -1) {
			imports = append(imports, n[1])
		}
		slices.Sort(imports)
		table[m[1]] = imports
	}
	if len(table) == 0 {
		t.Fatalf("%s has no import table under \"## Packages and their imports\"", path)
	}
	return table
}
