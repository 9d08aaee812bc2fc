package main

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/server/store"
)

func init() {
	register("store", "verify a service's data folder (midsag store check DIR)", runStore)
}

// runStore dispatches "midsag store <subverb>"; check is the only one.
func runStore(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	if len(args) == 0 || args[0] == "-h" || args[0] == "--help" || args[0] == "help" {
		fmt.Fprintln(stderr, "usage: midsag store check [flags] DIR")
		if len(args) == 0 {
			return usagef("store: missing subverb (check)")
		}
		return nil
	}
	if args[0] != "check" {
		return usagef("store: unknown subverb %q (want check)", args[0])
	}
	return runStoreCheck(ctx, args[1:], stdout, stderr)
}

// errStoreDamaged is the runtime failure of a check that found damage.
var errStoreDamaged = errors.New("store check: the store is damaged")

func runStoreCheck(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlags("store check", "DIR",
		"Verifies the data folder of midsag serve (--data-dir) without changing it, also\n"+
			"while the service runs: SQLite's integrity check of midsag.db, every stored\n"+
			"instance's spool file against the size and sha256 recorded when it arrived, and\n"+
			"spool files no row points to (removed at the next start). Exits 1 when\n"+
			"anything is damaged, 0 when only leftovers were found.", stderr)
	asJSON := fs.Bool("json", false, "print the report as JSON")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if fs.NArg() != 1 {
		return usagef("store check: want exactly one DIR, got %d arguments", fs.NArg())
	}
	rep, err := store.Check(ctx, fs.Arg(0), nil)
	if err != nil {
		return err
	}
	if *asJSON {
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		err = enc.Encode(struct {
			store.Report
			Damaged bool   `json:"damaged"`
			Notice  string `json:"notice"`
		}{rep, rep.Bad(), midsag.Notice})
	} else {
		err = printStoreReport(stdout, fs.Arg(0), rep)
	}
	if err != nil {
		return fmt.Errorf("store check: write: %w", err)
	}
	if rep.Bad() {
		return errStoreDamaged
	}
	return nil
}

func printStoreReport(w io.Writer, dir string, rep store.Report) error {
	fmt.Fprintf(w, "%s\n\n", midsag.Notice)
	for _, p := range rep.Problems {
		if p.SOPInstanceUID != "" {
			fmt.Fprintf(w, "%-12s %s %s: %s\n", p.Kind, p.SOPInstanceUID, p.Path, p.Detail)
		} else {
			fmt.Fprintf(w, "%-12s %s: %s\n", p.Kind, p.Path, p.Detail)
		}
	}
	verdict := "sound"
	if rep.Bad() {
		verdict = "DAMAGED"
	}
	_, err := fmt.Fprintf(w, "%s: %d instances (%d bytes) checked, %d findings: %s\n", dir, rep.Instances, rep.Bytes, len(rep.Problems), verdict)
	return err
}
