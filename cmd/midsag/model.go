package main

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"sort"
	"strings"
	"text/tabwriter"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/models"
)

func init() {
	register("model", "write a model's manifest (init) or inspect a model and its manifest", runModel)
}

// runModel dispatches "midsag model <subverb>": init or inspect.
func runModel(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	if len(args) == 0 || args[0] == "-h" || args[0] == "--help" || args[0] == "help" {
		fmt.Fprintln(stderr, "usage: midsag model init [flags] MODEL.onnx\n       midsag model inspect [flags] PATH")
		if len(args) == 0 {
			return usagef("model: missing subverb (init or inspect)")
		}
		return nil
	}
	switch args[0] {
	case "init":
		return runModelInit(ctx, args[1:], stdout, stderr)
	case "inspect":
		return runModelInspect(ctx, args[1:], stdout, stderr)
	default:
		return usagef("model: unknown subverb %q (want init or inspect)", args[0])
	}
}

func runModelInspect(_ context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlags("model inspect", "PATH",
		"Prints a model file's sha256, graph summary and manifest (the sidecar\n"+
			"NAME.manifest.json wins over the one embedded in the model). When the\n"+
			"ONNX Runtime library is found it also loads the model and checks it\n"+
			"against its manifest.", stderr)
	asJSON := fs.Bool("json", false, "print the inspection as JSON")
	ortLib := fs.String("ort-lib", "", "path of libonnxruntime.so.1 (default: searched)")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if fs.NArg() != 1 {
		return usagef("model inspect: want exactly one model PATH, got %d arguments", fs.NArg())
	}
	ins, err := models.Inspect(fs.Arg(0))
	if err != nil {
		return err
	}
	// The runtime check is extra: without the library the file can still be
	// inspected, so a missing library is reported, not fatal. An explicit
	// --ort-lib that does not work is the caller's mistake and is fatal.
	lib, err := models.FindLibrary(*ortLib)
	if err == nil {
		err = models.Init(lib)
	}
	switch {
	case ins.InitCommand != "":
		ins.Runtime = &models.RuntimeCheck{Error: "no manifest to check the model against"}
	case err == nil:
		ins.CheckRuntime(lib, models.Options{IntraOpThreads: 1})
	case *ortLib != "":
		return fmt.Errorf("model inspect: %w", err)
	default:
		ins.Runtime = &models.RuntimeCheck{Error: err.Error()}
	}
	if *asJSON {
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		err = enc.Encode(ins)
	} else {
		err = printInspection(stdout, ins)
	}
	if err != nil {
		return fmt.Errorf("model inspect: write: %w", err)
	}
	return inspectVerdict(ins, stderr)
}

// inspectVerdict makes the exit code usable as a gate before deploying a
// model: a missing or invalid manifest, or a model ONNX Runtime refuses,
// exits with the rejection code after the full report was printed.
func inspectVerdict(ins *models.Inspection, stderr io.Writer) error {
	problem := ins.ManifestError
	if ins.InitCommand != "" {
		problem += "; write one with: " + ins.InitCommand
	}
	if r := ins.Runtime; problem == "" && r != nil && r.Library != "" && !r.OK {
		problem = r.Error
	}
	if problem == "" {
		return nil
	}
	fmt.Fprintf(stderr, "midsag: rejected: %s\n", problem)
	return &reportedError{err: errors.New(problem), code: exitRejected}
}

// printInspection writes the human-readable form of an Inspection.
func printInspection(w io.Writer, ins *models.Inspection) error {
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	row := func(k, v string) { fmt.Fprintf(tw, "%s\t%s\n", k, v) }
	row("file", ins.Path)
	row("sha256", ins.SHA256)
	row("size", fmt.Sprintf("%d bytes", ins.SizeBytes))
	row("ir_version", fmt.Sprint(ins.IRVersion))
	row("producer", strings.TrimSpace(ins.ProducerName+" "+ins.ProducerVersion))
	var opsets []string
	for _, o := range ins.Opsets {
		d := o.Domain
		if d == "" {
			d = "ai.onnx"
		}
		opsets = append(opsets, fmt.Sprintf("%s %d", d, o.Version))
	}
	row("opsets", strings.Join(opsets, ", "))
	ops := make([]string, 0, len(ins.OpCounts))
	for op, n := range ins.OpCounts {
		ops = append(ops, fmt.Sprintf("%s x%d", op, n))
	}
	sort.Strings(ops)
	row("nodes", fmt.Sprintf("%d (%s)", ins.Nodes, strings.Join(ops, ", ")))
	for _, t := range ins.Inputs {
		row("input", fmt.Sprintf("%s %s [%s]", t.Name, t.ElemType, strings.Join(t.Shape, ",")))
	}
	for _, t := range ins.Outputs {
		row("output", fmt.Sprintf("%s %s [%s]", t.Name, t.ElemType, strings.Join(t.Shape, ",")))
	}
	row("metadata keys", strings.Join(ins.MetadataKeys, ", "))
	if m := ins.Manifest; m != nil {
		row("manifest", ins.ManifestSource)
		row("  name", m.Name+" "+m.Version)
		row("  description", m.Description)
		row("  intended use", m.IntendedUse)
		row("  training cohort", m.TrainingCohort)
		row("  labels", fmt.Sprintf("negative %q, positive %q", m.Labels[0], m.Labels[1]))
		in := m.Input
		row("  input", fmt.Sprintf("%s %s %d slices (step %d) of %dx%d, spacing %g mm, normalize %s",
			in.Name, in.Layout, in.Slices, in.SliceStep, in.Height, in.Width, in.PixelSpacingMM, in.Normalize))
		row("  output", fmt.Sprintf("%s %s, positive index %d", m.Output.Name, m.Output.Kind, m.Output.PositiveIndex))
		cal := m.Calibration.Method
		if cal == "temperature" {
			cal += fmt.Sprintf(" (T=%g)", m.Calibration.Temperature)
		}
		row("  calibration", cal)
		row("  threshold", fmt.Sprint(m.Threshold))
	} else {
		row("manifest", "MISSING OR INVALID: "+ins.ManifestError)
	}
	if ins.InitCommand != "" {
		row("write one", ins.InitCommand)
	}
	if r := ins.Runtime; r != nil {
		switch {
		case r.OK:
			row("onnxruntime", fmt.Sprintf("loads and matches the manifest (%.1f ms, %s)", r.LoadMS, r.Library))
		case r.Library == "":
			row("onnxruntime", "not checked: "+r.Error)
		default:
			row("onnxruntime", "FAILED: "+r.Error)
		}
	}
	row("notice", midsag.Notice)
	return tw.Flush()
}
