// Command tautline is the operator's and developer's tool for tautline:
// it checks cell and cue files, rehearses against a simulated cell, replays
// captures, fits model parameters and draws reports.
//
// Each subcommand lives in its own file and registers itself in init with
// register; main only dispatches.
package main

import (
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"sort"
	"strings"
)

// command is one subcommand. run gets the arguments after the subcommand's
// name and writes its normal output to stdout. It returns errUsage (wrapped
// or not) for bad flags or arguments, which exits with status 2.
type command struct {
	name    string
	summary string // one line for the overview
	run     func(args []string, stdout, stderr io.Writer) error
}

var commands = map[string]*command{}

func register(c *command) {
	if _, dup := commands[c.name]; dup {
		panic("tautline: subcommand registered twice: " + c.name)
	}
	commands[c.name] = c
}

// errUsage marks a usage mistake (exit status 2, as flag does).
var errUsage = errors.New("usage")

func main() {
	os.Exit(run(os.Args[1:], os.Stdout, os.Stderr))
}

func run(args []string, stdout, stderr io.Writer) int {
	if len(args) == 0 || args[0] == "-h" || args[0] == "--help" || args[0] == "help" {
		overview(stdout)
		if len(args) == 0 {
			return 2
		}
		return 0
	}
	c, ok := commands[args[0]]
	if !ok {
		fmt.Fprintf(stderr, "tautline: unknown subcommand %q\n\n", args[0])
		overview(stderr)
		return 2
	}
	err := c.run(args[1:], stdout, stderr)
	switch {
	case err == nil:
		return 0
	case errors.Is(err, flag.ErrHelp):
		return 0
	case errors.Is(err, errUsage):
		if msg := strings.TrimPrefix(err.Error(), errUsage.Error()+": "); msg != errUsage.Error() {
			fmt.Fprintf(stderr, "tautline %s: %s\n", c.name, msg)
		}
		return 2
	default:
		fmt.Fprintf(stderr, "tautline %s: %v\n", c.name, err)
		return 1
	}
}

func overview(w io.Writer) {
	fmt.Fprintln(w, "tautline: feedback for string figures on robot arms")
	fmt.Fprintln(w)
	fmt.Fprintln(w, "usage: tautline <subcommand> [flags] [args]")
	fmt.Fprintln(w)
	names := make([]string, 0, len(commands))
	for n := range commands {
		names = append(names, n)
	}
	sort.Strings(names)
	for _, n := range names {
		fmt.Fprintf(w, "  %-10s %s\n", n, commands[n].summary)
	}
	fmt.Fprintln(w)
	fmt.Fprintln(w, "Run 'tautline <subcommand> --help' for its flags.")
}

// newFlags makes a FlagSet for a subcommand whose usage text names it and
// prints its synopsis and description.
func newFlags(name, synopsis, description string, stderr io.Writer) *flag.FlagSet {
	fs := flag.NewFlagSet("tautline "+name, flag.ContinueOnError)
	fs.SetOutput(stderr)
	fs.Usage = func() {
		fmt.Fprintf(stderr, "usage: tautline %s %s\n\n%s\n", name, synopsis, strings.TrimSpace(description))
		var any bool
		fs.VisitAll(func(*flag.Flag) { any = true })
		if any {
			fmt.Fprintln(stderr, "\nflags:")
			fs.PrintDefaults()
		}
	}
	return fs
}

// parseFlags parses and maps flag errors to errUsage.
func parseFlags(fs *flag.FlagSet, args []string) error {
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return err
		}
		return fmt.Errorf("%w: %v", errUsage, err)
	}
	return nil
}
