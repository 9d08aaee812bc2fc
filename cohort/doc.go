// Package cohort scores whole cohorts: it discovers studies in a folder
// tree (nested folders and zip archives, any layout) by reading DICOM
// headers only, keeps a header index and every finished study's row in a
// SQLite store in the output folder, runs the one midsag.Pipeline on each
// study with a bounded number of workers, and writes results.csv and
// results.jsonl. Runs resume: a study recorded with the same model is not
// scored again. A cohort splits into shards by a stable hash of the Study
// Instance UID, and Merge joins the shards' tables into the table a single
// run writes.
//
//	st, err := cohort.Open(outDir)
//	sum, err := st.Run(ctx, cohort.Options{Root: root, Pipeline: p, Workers: 2})
package cohort
