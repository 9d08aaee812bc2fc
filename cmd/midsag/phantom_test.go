package main

import (
	"bytes"
	"context"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/midsag/midsag/internal/testtool"
)

func TestPhantomWritesStudiesAndLabels(t *testing.T) {
	dir := t.TempDir()
	var out, errb bytes.Buffer
	code := run(context.Background(), []string{"phantom", "--out", dir, "--studies", "2", "--seed", "3", "--no-decoys", "--syntax", "rle,explicit-be"}, &out, &errb)
	if code != exitOK {
		t.Fatalf("exit %d: %s", code, errb.String())
	}
	rows := testtool.ReadCSV(t, filepath.Join(dir, "labels.csv"))
	if len(rows) != 3 || rows[0][0] != "study_instance_uid" || rows[0][1] != "label" {
		t.Fatalf("labels.csv rows %v", rows)
	}
	for _, r := range rows[1:] {
		if r[1] != "0" && r[1] != "1" {
			t.Errorf("label %q", r[1])
		}
	}
	for _, s := range []string{"study-0000", "study-0001"} {
		ents, err := os.ReadDir(filepath.Join(dir, s))
		if err != nil || len(ents) < 11 {
			t.Errorf("%s: %d files (%v), want at least 11 slices", s, len(ents), err)
		}
		for _, e := range ents {
			b, err := os.ReadFile(filepath.Join(dir, s, e.Name()))
			// Part 10 files carry "DICM" after the 128-byte preamble (PS3.10 7.1).
			if err != nil || len(b) < 132 || string(b[128:132]) != "DICM" {
				t.Fatalf("%s/%s is not a DICOM Part 10 file", s, e.Name())
			}
		}
	}
	if _, err := os.Stat(filepath.Join(dir, "truth.json")); err != nil {
		t.Error(err)
	}
	if !strings.Contains(out.String(), "wrote 2 studies") {
		t.Errorf("stdout: %s", out.String())
	}
}

func TestPhantomUsageErrors(t *testing.T) {
	for _, args := range [][]string{
		{"phantom"},
		{"phantom", "--out", t.TempDir(), "--syntax", "jpeg2000"},
		{"phantom", "--out", t.TempDir(), "--studies", "0"},
	} {
		var out, errb bytes.Buffer
		if code := run(context.Background(), args, &out, &errb); code != exitUsage {
			t.Errorf("%v: exit %d, want %d (%s)", args, code, exitUsage, errb.String())
		}
	}
}
