package evaluate

import (
	"runtime/debug"
	"sort"
)

// Provenance says where a report's numbers came from: the files read
// (with their sha256), the program and model, the command and the date.
type Provenance struct {
	Inputs  []InputFile `json:"inputs"`
	Version string      `json:"midsag_version"`
	// Models are the model_sha256 values of the table's scored cases
	// (a batch table carries one per study); empty when the table has no
	// such column.
	Models  []string `json:"models"`
	Command []string `json:"command_line"`
	Date    string   `json:"date"`
}

// InputFile is one file the evaluation read.
type InputFile struct {
	Role   string `json:"role"`
	Path   string `json:"path"`
	SHA256 string `json:"sha256"`
	Bytes  int64  `json:"bytes"`
}

// Version returns midsag's version as the Go toolchain recorded it in the
// binary: the module version and, for a build from a checkout, the VCS
// revision and whether the tree had uncommitted changes.
func Version(implementation string) string {
	v := implementation
	bi, ok := debug.ReadBuildInfo()
	if !ok {
		return v
	}
	if bi.Main.Version != "" {
		v += " " + bi.Main.Version
	}
	settings := map[string]string{}
	for _, s := range bi.Settings {
		settings[s.Key] = s.Value
	}
	if r := settings["vcs.revision"]; r != "" {
		v += " revision " + r
		if settings["vcs.modified"] == "true" {
			v += " (modified)"
		}
	}
	return v
}

// modelsOf lists the table's model hashes, most cases first.
func modelsOf(m map[string]int) []string {
	out := make([]string, 0, len(m))
	for k := range m {
		out = append(out, k)
	}
	sort.Slice(out, func(i, j int) bool {
		if m[out[i]] != m[out[j]] {
			return m[out[i]] > m[out[j]]
		}
		return out[i] < out[j]
	})
	return out
}
