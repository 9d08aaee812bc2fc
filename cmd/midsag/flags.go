package main

import (
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"strings"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/server"
)

// errHelp is returned when -h was asked for; the usage is already printed.
var errHelp = errors.New("help requested")

// newFlags returns a FlagSet for verb whose usage text goes to stderr.
func newFlags(verb, argsUsage, about string, stderr io.Writer) *flag.FlagSet {
	fs := flag.NewFlagSet("midsag "+verb, flag.ContinueOnError)
	fs.SetOutput(stderr)
	fs.Usage = func() {
		fmt.Fprintf(stderr, "usage: midsag %s [flags] %s\n\n%s\n\nflags (each also read from MIDSAG_<NAME> in the environment):\n", verb, argsUsage, about)
		fs.PrintDefaults()
	}
	return fs
}

// parseFlags applies MIDSAG_* environment fallbacks for flags not given on
// the command line, then parses args.
func parseFlags(fs *flag.FlagSet, args []string) error {
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return errHelp
		}
		return &usageError{msg: err.Error()}
	}
	set := map[string]bool{}
	fs.Visit(func(f *flag.Flag) { set[f.Name] = true })
	var envErr error
	fs.VisitAll(func(f *flag.Flag) {
		if set[f.Name] || envErr != nil {
			return
		}
		key := "MIDSAG_" + strings.ToUpper(strings.ReplaceAll(f.Name, "-", "_"))
		if v, ok := os.LookupEnv(key); ok {
			if err := fs.Set(f.Name, v); err != nil {
				envErr = usagef("%s=%q: %v", key, v, err)
			}
		}
	})
	return envErr
}

// rejectionCode returns exitRejected for an input refusal, else 0.
func rejectionCode(err error) int {
	if isRefusal(err) {
		return exitRejected
	}
	return 0
}

// isRefusal reports whether err is an input refusal with a reason code:
// any code but the failures that server.ReasonTable marks as faults
// (internal, error), which exit as runtime failures.
func isRefusal(err error) bool {
	r, ok := midsag.ReasonOf(err)
	return ok && !server.MappingOf(r).Fault
}
