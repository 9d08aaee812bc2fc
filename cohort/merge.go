package cohort

import (
	"fmt"
	"os"

	"github.com/midsag/midsag"
)

// Merge reads results.jsonl from each shard folder and writes out's
// results.csv and results.jsonl, the same files one run over the whole
// cohort writes. It refuses shards made with different model sha256s, and
// shards that share a study, with a *midsag.Error (midsag.ReasonMixedModels,
// midsag.ReasonOverlappingStudies).
func Merge(out string, shardDirs []string) (int, error) {
	var (
		all   []Row
		model string
		from  string
		seen  = map[string]string{}
	)
	for _, dir := range shardDirs {
		rows, err := ReadRows(dir)
		if err != nil {
			return 0, err
		}
		for _, r := range rows {
			if model == "" {
				model, from = r.ModelSHA256, dir
			}
			if r.ModelSHA256 != model {
				return 0, midsag.Rejectf(midsag.ReasonMixedModels, "%s was scored with model sha256 %.12s, %s with %.12s", dir, r.ModelSHA256, from, model)
			}
			if prev, dup := seen[r.StudyInstanceUID]; dup {
				return 0, midsag.Rejectf(midsag.ReasonOverlappingStudies, "a study is in both %s and %s", prev, dir)
			}
			seen[r.StudyInstanceUID] = dir
			all = append(all, r)
		}
	}
	if err := os.MkdirAll(out, 0o755); err != nil {
		return 0, fmt.Errorf("merge: %w", err)
	}
	if err := WriteTables(out, all); err != nil {
		return 0, fmt.Errorf("merge: %w", err)
	}
	return len(all), nil
}
