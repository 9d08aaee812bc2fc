package main

import (
	"context"
	"fmt"
	"io"
	"sort"
	"strings"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/phantom"
)

func init() {
	register("phantom", "write synthetic cervical MRI studies as DICOM (demo and tests)", runPhantom)
}

// syntaxNames maps the --syntax names to transfer syntax UIDs (PS3.5
// Section 10, Annex A).
var syntaxNames = map[string]string{
	"explicit-le":   midsag.ExplicitVRLittleEndian,
	"implicit-le":   midsag.ImplicitVRLittleEndian,
	"explicit-be":   midsag.ExplicitVRBigEndian,
	"deflated":      midsag.DeflatedExplicitVRLittleEndian,
	"rle":           midsag.RLELossless,
	"jpeg-lossless": midsag.JPEGLosslessSV1,
}

func runPhantom(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlags("phantom", "", "Writes synthetic cervical spine MRI studies of the fictional Northfield Spine\n"+
		"Imaging Lab cohort as DICOM under OUT/study-NNNN/, with OUT/labels.csv\n"+
		"(study_instance_uid,label; 1 = cord compression) and OUT/truth.json (exact\n"+
		"midline slice, slab offset, compression level). Research use only.", stderr)
	out := fs.String("out", "", "output `folder` (required)")
	studies := fs.Int("studies", 10, "number of studies")
	seed := fs.Int64("seed", 1, "seed; a study depends only on the seed and its index")
	syntax := fs.String("syntax", "", "comma-separated transfer syntaxes to draw from: "+strings.Join(sortedSyntaxNames(), ", ")+" (default all)")
	noDecoys := fs.Bool("no-decoys", false, "write only the T2 sagittal series")
	rate := fs.Float64("compression-rate", 0, "fraction of studies with compression (0 = default 0.5, negative = none)")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if fs.NArg() != 0 {
		return usagef("phantom takes no arguments")
	}
	if *out == "" {
		return usagef("phantom: --out is required")
	}
	if *studies < 1 {
		return usagef("phantom: --studies must be at least 1")
	}
	if *rate > 1 {
		return usagef("phantom: --compression-rate must be at most 1")
	}
	opts := phantom.Options{Studies: *studies, Seed: *seed, NoDecoys: *noDecoys, CompressionRate: *rate}
	if *syntax != "" {
		for _, name := range strings.Split(*syntax, ",") {
			uid, ok := syntaxNames[strings.TrimSpace(name)]
			if !ok {
				return usagef("phantom: unknown --syntax %q (want %s)", name, strings.Join(sortedSyntaxNames(), ", "))
			}
			opts.Syntaxes = append(opts.Syntaxes, uid)
		}
	}
	if err := ctx.Err(); err != nil {
		return err
	}
	truths, err := phantom.GenerateContext(ctx, *out, opts)
	if err != nil {
		return fmt.Errorf("phantom: %w", err)
	}
	positive := 0
	for _, t := range truths {
		label := "no compression"
		if t.Compression {
			label = "compression " + t.Level
			positive++
		}
		fmt.Fprintf(stdout, "%s  %2d slices  centre %2d  offset %+5.2f  %-20s %s\n",
			t.Study, t.Slices, t.CenterIndex, t.SlabOffsetSlices, label, t.TransferSyntaxUID)
	}
	fmt.Fprintf(stdout, "wrote %d studies (%d with compression) to %s\n", len(truths), positive, *out)
	return nil
}

func sortedSyntaxNames() []string {
	names := make([]string, 0, len(syntaxNames))
	for n := range syntaxNames {
		names = append(names, n)
	}
	sort.Strings(names)
	return names
}
