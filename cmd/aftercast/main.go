// Command aftercast is the aftercast binary: the service (serve, migrate),
// its command-line clients, offline evaluation and the demo. Each
// subcommand lives in its own file and only wires flags to packages.
package main

import (
	"errors"
	"flag"
	"fmt"
	"io"
	"os"

	"github.com/aftercast/aftercast/server"
)

// command is one subcommand: it parses its own flags from args and returns
// an error to report, or errUsage after printing usage itself.
type command struct {
	name  string
	short string
	run   func(args []string, stdout, stderr io.Writer) error
}

var errUsage = errors.New("usage")

func commands() []command {
	return []command{
		{"serve", "run the aftercast service (gRPC, /metrics, health)", runServe},
		{"migrate", "apply the database schema migrations and exit", runMigrate},
		{"series", "create, get or list series (client)", runSeries},
		{"push", "push forecasts or actuals from a CSV file (client)", runPush},
		{"stored", "read back the stored forecasts or actuals of a series, as CSV that push reads again (client)", runStored},
		{"accuracy", "per-lead accuracy of a series and model (client)", runAccuracy},
		{"pairs", "export the scored pairs of a series and model (client)", runPairs},
		{"baseline", "import a backtest as a baseline, or show one (client)", runBaseline},
		{"drift", "current drift states with their onsets, or (drift history) the replayed transitions (client)", runDrift},
		{"events", "drift events with their onsets and causes, or follow them as they happen (client)", runEvents},
		{"evaluate", "score a CSV of forecasts and actuals offline, per lead", runEvaluate},
		{"demo", "run the service on invented district-heating data and report the drift states it finds", runDemo},
	}
}

func main() { os.Exit(run(os.Args[1:], os.Stdout, os.Stderr)) }

func run(args []string, stdout, stderr io.Writer) int {
	if len(args) == 0 || args[0] == "-h" || args[0] == "--help" || args[0] == "help" {
		usage(stderr)
		if len(args) == 0 {
			return 2
		}
		return 0
	}
	if args[0] == "--version" || args[0] == "-version" || args[0] == "version" {
		fmt.Fprintf(stdout, "aftercast %s\n", server.Version())
		return 0
	}
	for _, c := range commands() {
		if c.name != args[0] {
			continue
		}
		err := c.run(args[1:], stdout, stderr)
		switch {
		case err == nil:
			return 0
		case errors.Is(err, flag.ErrHelp):
			return 0
		case errors.Is(err, errUsage):
			return 2
		}
		fmt.Fprintf(stderr, "aftercast %s: %v\n", c.name, err)
		return 1
	}
	fmt.Fprintf(stderr, "aftercast: unknown command %q\n\n", args[0])
	usage(stderr)
	return 2
}

func usage(w io.Writer) {
	fmt.Fprintln(w, "usage: aftercast COMMAND [flags]\n\ncommands:")
	for _, c := range commands() {
		fmt.Fprintf(w, "  %-10s %s\n", c.name, c.short)
	}
	fmt.Fprintln(w, "\nRun 'aftercast COMMAND -h' for a command's flags, 'aftercast --version' for this build's version.")
}

// newFlags makes a flag set whose errors are returned, not fatal, and
// whose usage line names the command.
func newFlags(name, args string, stderr io.Writer) *flag.FlagSet {
	fs := flag.NewFlagSet("aftercast "+name, flag.ContinueOnError)
	fs.SetOutput(stderr)
	fs.Usage = func() {
		fmt.Fprintf(stderr, "usage: aftercast %s [flags] %s\n\nflags:\n", name, args)
		fs.PrintDefaults()
	}
	return fs
}

// parseFlags parses args, mapping a flag error to errUsage (the flag
// package has already printed it).
func parseFlags(fs *flag.FlagSet, args []string) error {
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return err
		}
		return errUsage
	}
	return nil
}
