package main

import (
	"context"
	"fmt"
	"io"
	"path/filepath"

	"github.com/midsag/midsag/cohort"
)

func init() {
	register("merge", "combine the results of batch shards into one table", runMerge)
}

func runMerge(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlags("merge", "SHARD_DIR...", "Combines the results.jsonl of batch shard folders into OUT/results.csv and\n"+
		"OUT/results.jsonl, the files one batch over the whole cohort writes. Refuses (exit 3)\n"+
		"shards scored with different models (mixed_models) or sharing a study (overlapping_studies).", stderr)
	out := fs.String("out", "", "output `folder` (required)")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if fs.NArg() == 0 || *out == "" {
		fs.Usage()
		return usagef("merge needs --out and at least one SHARD_DIR")
	}
	n, err := cohort.Merge(*out, fs.Args())
	if err != nil {
		return reportRejection(err, false, stderr)
	}
	fmt.Fprintf(stdout, "merged %d studies from %d shards into %s\n", n, fs.NArg(), filepath.Join(*out, cohort.CSVName))
	return nil
}
