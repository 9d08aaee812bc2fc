// Command midsag scores cervical spine MRI studies with a research group's
// own ONNX classifier on the CPU. Run "midsag help" for the verbs.
package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"os/signal"
	"sort"
	"syscall"
)

// command is one verb of the CLI.
type command struct {
	summary string
	run     func(ctx context.Context, args []string, stdout, stderr io.Writer) error
}

// commands maps each verb to its implementation; each lives in its own file.
var commands = map[string]command{}

// register adds a verb; called from the init function of each verb's file.
func register(name, summary string, run func(ctx context.Context, args []string, stdout, stderr io.Writer) error) {
	commands[name] = command{summary: summary, run: run}
}

// Exit codes (docs/ARCHITECTURE.md).
const (
	exitOK       = 0
	exitRuntime  = 1
	exitUsage    = 2
	exitRejected = 3
)

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	code := run(ctx, os.Args[1:], os.Stdout, os.Stderr)
	stop()
	os.Exit(code)
}

func run(ctx context.Context, args []string, stdout, stderr io.Writer) int {
	if len(args) == 0 || args[0] == "help" || args[0] == "-h" || args[0] == "--help" {
		usage(stdout)
		if len(args) == 0 {
			return exitUsage
		}
		return exitOK
	}
	c, ok := commands[args[0]]
	if !ok {
		fmt.Fprintf(stderr, "midsag: unknown verb %q\n", args[0])
		usage(stderr)
		return exitUsage
	}
	return exitCode(c.run(ctx, args[1:], stdout, stderr), stderr)
}

func usage(w io.Writer) {
	fmt.Fprintln(w, "usage: midsag <verb> [flags] [args]")
	fmt.Fprintln(w, "\nverbs:")
	names := make([]string, 0, len(commands))
	for n := range commands {
		names = append(names, n)
	}
	sort.Strings(names)
	for _, n := range names {
		fmt.Fprintf(w, "  %-14s %s\n", n, commands[n].summary)
	}
	fmt.Fprintln(w, "\nRun 'midsag <verb> -h' for a verb's flags. Research use only.")
}

// usageError marks an error caused by how the command was called.
type usageError struct{ msg string }

func (e *usageError) Error() string { return e.msg }

func usagef(format string, args ...any) error {
	return &usageError{msg: fmt.Sprintf(format, args...)}
}

// reportedError marks an error already written to stderr in full (for
// example as JSON); exitCode only maps it to its code.
type reportedError struct {
	err  error
	code int
}

func (e *reportedError) Error() string { return e.err.Error() }
func (e *reportedError) Unwrap() error { return e.err }

func exitCode(err error, stderr io.Writer) int {
	if err == nil {
		return exitOK
	}
	var rep *reportedError
	if errors.As(err, &rep) {
		return rep.code
	}
	var ue *usageError
	if errors.As(err, &ue) {
		fmt.Fprintf(stderr, "midsag: %s\n", ue.msg)
		return exitUsage
	}
	if errors.Is(err, errHelp) {
		return exitOK
	}
	if code := rejectionCode(err); code != 0 {
		fmt.Fprintf(stderr, "midsag: rejected: %v\n", err)
		return code
	}
	fmt.Fprintf(stderr, "midsag: %v\n", err)
	return exitRuntime
}
