// Command lotwatch monitors the defect rate of inspected lots: it logs
// lots, draws p, np, u and c control charts, judges each lot against
// frozen limits and run rules, and produces the weekly review.
//
// main only wires: each subcommand lives in its own file and registers
// itself in commands.
package main

import (
	"fmt"
	"io"
	"os"
	"sort"
	"strings"

	"lotwatch/store"
)

// exit codes shared by every subcommand.
const (
	exitOK    = 0
	exitFail  = 1 // the command ran and found a problem (e.g. audit chain broken)
	exitUsage = 2 // bad input or bad flags: nothing was done
)

// command is one subcommand of lotwatch.
type command struct {
	name    string
	summary string // one line for `lotwatch help`
	run     func(args []string, stdin io.Reader, stdout, stderr io.Writer) int
}

var commands = map[string]command{}

func register(c command) {
	if _, dup := commands[c.name]; dup {
		panic("lotwatch: command registered twice: " + c.name)
	}
	commands[c.name] = c
}

func main() {
	os.Exit(run(os.Args[1:], os.Stdin, os.Stdout, os.Stderr))
}

// run dispatches to a subcommand and returns the exit status.
func run(args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	if len(args) == 0 {
		usage(stderr)
		return exitUsage
	}
	name := args[0]
	if name == "-version" || name == "--version" {
		name, args = "version", append([]string{"version"}, args[1:]...)
	}
	if name == "help" || name == "-h" || name == "--help" {
		if len(args) > 1 {
			if c, ok := commands[args[1]]; ok {
				return c.run([]string{"-h"}, stdin, stdout, stderr)
			}
		}
		usage(stdout)
		return exitOK
	}
	if secrets := store.Secrets(args); len(secrets) > 0 {
		// A database URL's password never reaches the output, whatever
		// message would quote the URL.
		stdout, stderr = scrubWriter{stdout, secrets}, scrubWriter{stderr, secrets}
	}
	c, ok := commands[name]
	if !ok {
		fmt.Fprintf(stderr, "lotwatch: unknown command %q; run `lotwatch help` for the list\n", name)
		return exitUsage
	}
	return c.run(args[1:], stdin, stdout, stderr)
}

func usage(w io.Writer) {
	fmt.Fprint(w, `lotwatch monitors the defect rate of inspected lots with attribute
control charts (p, np, u, c), run rules and interval estimates.

Usage: lotwatch COMMAND [options]

Commands:
`)
	names := make([]string, 0, len(commands))
	for n := range commands {
		names = append(names, n)
	}
	sort.Strings(names)
	for _, n := range names {
		fmt.Fprintf(w, "  %-10s %s\n", n, commands[n].summary)
	}
	fmt.Fprint(w, `
Run "lotwatch COMMAND -h" for the options of one command.

`+caution)
}

// caution is printed by help and carried by every report: the tool informs
// decisions about product, it does not make them.
const caution = `Caution: a chart in control is not proof that the product meets its
specification, and lotwatch does not replace the plant's release or
acceptance procedure. Defer to the quality system, customer requirements
and local regulations.
`

// scrubWriter writes through to w with every secret masked.
type scrubWriter struct {
	w       io.Writer
	secrets []string
}

func (s scrubWriter) Write(p []byte) (int, error) {
	t := string(p)
	for _, sec := range s.secrets {
		t = strings.ReplaceAll(t, sec, "********")
	}
	if _, err := io.WriteString(s.w, t); err != nil {
		return 0, err
	}
	return len(p), nil
}
