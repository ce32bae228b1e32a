package main

// The helpers every command shares: parsing its options and arguments,
// collecting and printing usage problems, opening the database, naming
// the actor, printing the store's errors, and the number formats of the
// statistics commands. Two parsers live here: cliParse (options anywhere
// among the arguments, for the commands on a database) and statsParse
// (options first, so that a negative number is an argument, for interval,
// compare and plan).

import (
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"math"
	"os"
	"os/user"
	"strconv"
	"strings"

	"lotwatch/spc"
	"lotwatch/store"
)

// cliFlags makes a flag set that reports to stderr only through cliUsage.
func cliFlags(name string) *flag.FlagSet {
	fs := flag.NewFlagSet(name, flag.ContinueOnError)
	fs.SetOutput(io.Discard)
	return fs
}

// cliParse parses flags anywhere among the arguments and returns the
// positional ones ("-" counts as positional; "--" ends the flags). For -h
// it prints help on stdout and returns done with exitOK; for a bad flag it
// prints one line on stderr and returns done with exitUsage.
func cliParse(fs *flag.FlagSet, args []string, help string, stdout, stderr io.Writer) (pos []string, code int, done bool) {
	for {
		if err := fs.Parse(args); err != nil {
			if errors.Is(err, flag.ErrHelp) {
				fmt.Fprint(stdout, help)
				return nil, exitOK, true
			}
			fmt.Fprintf(stderr, "lotwatch %s: %v (run \"lotwatch %s -h\" for the options)\n", fs.Name(), err, strings.Fields(fs.Name())[0])
			return nil, exitUsage, true
		}
		rest := fs.Args()
		if len(rest) == 0 {
			return pos, 0, false
		}
		if len(args) > 0 && len(rest) < len(args) && args[len(args)-len(rest)-1] == "--" {
			return append(pos, rest...), 0, false
		}
		pos = append(pos, rest[0])
		args = rest[1:]
	}
}

// cliHelp is a command's help: head, the options as the flag package
// lists them from their usage strings, then tail.
func cliHelp(fs *flag.FlagSet, head, tail string) string {
	var b strings.Builder
	b.WriteString(head)
	fs.SetOutput(&b)
	fs.PrintDefaults()
	fs.SetOutput(io.Discard)
	b.WriteString(tail)
	return b.String()
}

// cliNoArgs is the problem of positional arguments given to a command that
// takes options only.
func cliNoArgs(pos []string) []string {
	if len(pos) == 0 {
		return nil
	}
	return []string{fmt.Sprintf("unexpected argument %q", pos[0])}
}

// cliProblems prints one line per problem and returns exitUsage.
func cliProblems(stderr io.Writer, cmd string, lines ...string) int {
	for _, l := range lines {
		fmt.Fprintf(stderr, "lotwatch %s: %s\n", cmd, l)
	}
	return exitUsage
}

// cliRequire reports the required flags left empty.
func cliRequire(cmd string, pairs ...string) []string {
	var out []string
	for i := 0; i+1 < len(pairs); i += 2 {
		if pairs[i+1] == "" {
			out = append(out, fmt.Sprintf("--%s is required", pairs[i]))
		}
	}
	return out
}

// cliActor is the name recorded in the audit trail for a change made from
// the command line: --as, else the operating-system user.
func cliActor(as string) string {
	if as != "" {
		return as
	}
	if u, err := user.Current(); err == nil && u.Username != "" {
		return u.Username
	}
	if n := os.Getenv("USER"); n != "" {
		return n
	}
	return "cli"
}

// cliStoreError prints a store error. Bad input (invalid, unknown,
// conflicting) gives exitUsage with one line per problem; anything else
// exitFail.
func cliStoreError(stderr io.Writer, cmd, file string, err error) int {
	var ve *store.ValidationError
	if errors.As(err, &ve) {
		for _, p := range ve.Problems {
			fmt.Fprintf(stderr, "lotwatch %s: %s\n", cmd, cliProblem(file, p))
		}
		if ve.More > 0 {
			fmt.Fprintf(stderr, "lotwatch %s: … and %d more\n", cmd, ve.More)
		}
		return exitUsage
	}
	fmt.Fprintf(stderr, "lotwatch %s: %v\n", cmd, err)
	if errors.Is(err, store.ErrNotFound) || errors.Is(err, store.ErrConflict) || errors.Is(err, store.ErrInvalid) || errors.Is(err, store.ErrNewerSchema) || errors.Is(err, store.ErrBadURL) {
		return exitUsage
	}
	return exitFail
}

// cliProblem formats a problem as FILE:LINE: column C, value "V": reason
// (FILE:SHEET!ROW for a row of a worksheet).
func cliProblem(file string, p store.Problem) string {
	var b strings.Builder
	if file != "" {
		b.WriteString(file)
		if p.Line > 0 && p.Sheet != "" {
			fmt.Fprintf(&b, ":%s!%d", p.Sheet, p.Line)
		} else if p.Line > 0 {
			fmt.Fprintf(&b, ":%d", p.Line)
		}
		b.WriteString(": ")
	} else if w := p.Where(); w != "" {
		b.WriteString(w + ": ")
	}
	if p.Field != "" {
		fmt.Fprintf(&b, "%s %s", map[bool]string{true: "column", false: "option"}[file != ""], p.Field)
		if p.Value != "" {
			fmt.Fprintf(&b, ", value %q", p.Value)
		}
		b.WriteString(": ")
	} else if p.Value != "" {
		fmt.Fprintf(&b, "value %q: ", p.Value)
	}
	b.WriteString(p.Reason)
	return b.String()
}

// cliOpen opens the database or prints why not.
func cliOpen(stderr io.Writer, cmd, path string) (*store.DB, int, bool) {
	db, err := store.Open(path)
	if err != nil {
		return nil, cliStoreError(stderr, cmd, "", err), false
	}
	return db, 0, true
}

// cliReplica points db's reads of lots at the streaming replica of
// --read-db (nothing when url is empty) or prints why not: exitUsage for
// a value that cannot be a replica of --db, exitFail for a server that
// cannot be reached.
func cliReplica(stderr io.Writer, cmd string, db *store.DB, url string) (int, bool) {
	if url == "" {
		return 0, true
	}
	err := db.UseReplica(url)
	if err == nil {
		return 0, true
	}
	fmt.Fprintf(stderr, "lotwatch %s: --read-db: %v\n", cmd, err)
	if errors.Is(err, store.ErrUnreachable) {
		return exitFail, false
	}
	return exitUsage, false
}

// readDBHelp is the help line of --read-db.
const readDBHelp = "`URL` of a streaming replica of a postgres:// --db, to read the lots of charts and reports from;\nthe primary answers for a process whose latest change the replica has not yet replayed"

// cliNoFile reports a --db value that names no file. A PostgreSQL URL is
// not a file: it is checked when it is opened.
func cliNoFile(db string) bool {
	if store.IsURL(db) {
		return false
	}
	_, err := os.Stat(db)
	return err != nil
}

// cliNotAFile is cliNoFile, also for a folder.
func cliNotAFile(db string) bool {
	if store.IsURL(db) {
		return false
	}
	st, err := os.Stat(db)
	return err != nil || st.IsDir()
}

// statsUsage collects the usage problems of one command invocation, one
// line each, so that all of them are reported at once.
type statsUsage struct {
	cmd      string
	problems []string
	// failed: a problem is not the command line's but the database
	// server's (unreachable, login refused): exitFail, not exitUsage.
	failed bool
}

func (u *statsUsage) addf(format string, a ...any) {
	u.problems = append(u.problems, fmt.Sprintf(format, a...))
}

// report prints the problems to stderr and returns exitUsage, or returns -1
// when there are none.
func (u *statsUsage) report(stderr io.Writer) int {
	if len(u.problems) == 0 {
		return -1
	}
	for _, p := range u.problems {
		fmt.Fprintf(stderr, "lotwatch %s: %s\n", u.cmd, p)
	}
	if u.failed {
		return exitFail
	}
	return exitUsage
}

// statsParse parses the leading options of args with fs and returns the
// positional arguments. Every option of these commands takes a value, so
// the options end at "--", at the first word not starting with "-", or at
// a negative number (which is a bad argument, not an option). It returns
// a status ≥ 0 when the command is done: exitOK after printing help,
// exitUsage after naming a bad option.
func statsParse(fs *flag.FlagSet, args []string, help string, stdout, stderr io.Writer) ([]string, int) {
	fs.SetOutput(io.Discard)
	fs.Usage = func() {}
	i := 0
	for i < len(args) {
		a := args[i]
		if a == "--" {
			i++
			break
		}
		if !strings.HasPrefix(a, "-") || a == "-" {
			break
		}
		if _, err := strconv.ParseFloat(a, 64); err == nil {
			break
		}
		name := strings.TrimLeft(a, "-")
		if strings.Contains(name, "=") || name == "h" || name == "help" {
			i++
		} else {
			i += 2
		}
	}
	i = min(i, len(args))
	if err := fs.Parse(args[:i]); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			fmt.Fprint(stdout, help)
			return nil, exitOK
		}
		msg := err.Error()
		if name, ok := strings.CutPrefix(msg, "flag provided but not defined: "); ok {
			for _, a := range args[:i] {
				if before, _, _ := strings.Cut(a, "="); strings.TrimLeft(before, "-") == strings.TrimLeft(name, "-") {
					name = before
					break
				}
			}
			msg = fmt.Sprintf("unknown option %s; run `lotwatch %s -h` for the options", name, fs.Name())
		}
		fmt.Fprintf(stderr, "lotwatch %s: %s\n", fs.Name(), msg)
		return nil, exitUsage
	}
	return append(fs.Args(), args[i:]...), -1
}

// arity reports a wrong number of positional arguments, with a hint when
// an option came after them.
func (u *statsUsage) arity(want string, wantN int, pos []string) bool {
	if len(pos) == wantN {
		return true
	}
	hint := ""
	for _, a := range pos {
		if _, err := strconv.ParseFloat(a, 64); strings.HasPrefix(a, "-") && err != nil {
			hint = "; options go before the arguments"
			break
		}
	}
	u.addf("want %d arguments, %s, got %d (%s)%s", wantN, want, len(pos), strings.Join(pos, " "), hint)
	return false
}

// count parses a whole-number argument that must be at least lowest.
func (u *statsUsage) count(name, s string, lowest int64) int64 {
	v, err := strconv.ParseInt(s, 10, 64)
	switch {
	case err != nil:
		u.addf("%s %q is not a whole number", name, s)
	case v < lowest && lowest == 0:
		u.addf("%s %q must not be negative", name, s)
	case v < lowest:
		u.addf("%s %q must be %d or more", name, s, lowest)
	}
	return v
}

// level parses a confidence level in (0, 1).
func (u *statsUsage) level(s string) float64 {
	v, err := strconv.ParseFloat(s, 64)
	if err != nil || !(v > 0 && v < 1) {
		u.addf("--level %q must be a number between 0 and 1, such as 0.95", s)
	}
	return v
}

// format checks the --format value.
func (u *statsUsage) format(s string) bool {
	switch s {
	case "text":
		return false
	case "json":
		return true
	}
	u.addf("--format %q must be text or json", s)
	return false
}

// statsRate formats a rate for reading: four decimals, or three significant
// digits in exponent form for rates under 0.001 that four decimals would hide.
func statsRate(x float64) string {
	if x == 0 || math.Abs(x) >= 0.001 {
		return strconv.FormatFloat(x, 'f', 4, 64)
	}
	return strconv.FormatFloat(x, 'e', 2, 64)
}

// statsPercent formats a confidence level as a percentage, e.g. "95%".
func statsPercent(level float64) string {
	return strconv.FormatFloat(level*100, 'g', 6, 64) + "%"
}

// statsJSON writes v as indented JSON.
func statsJSON(w io.Writer, v any) int {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	if err := enc.Encode(v); err != nil {
		return exitFail
	}
	return exitOK
}

// week checks a --week value, an ISO week such as 2026-W05.
func (u *statsUsage) week(s string) {
	if s == "" {
		return
	}
	if _, _, err := spc.ParseISOWeek(s); err != nil {
		u.addf("--week %q %s", s, strings.TrimPrefix(err.Error(), fmt.Sprintf("week %q ", s)))
	}
}

// cliAction is one action of a command that takes several, such as
// "process add".
type cliAction struct {
	name string
	run  func(args []string, stdout, stderr io.Writer) int
}

// cliActions runs the action args[0] names, prints help for -h, and
// otherwise says which actions the command takes, in one line.
func cliActions(cmd, help string, args []string, stdout, stderr io.Writer, actions ...cliAction) int {
	names := make([]string, len(actions))
	quoted := make([]string, len(actions))
	for i, a := range actions {
		names[i], quoted[i] = a.name, strconv.Quote(a.name)
	}
	if len(args) == 0 {
		return cliProblems(stderr, cmd, fmt.Sprintf("say %s (run \"lotwatch %s -h\" for the options)", orList(quoted), cmd))
	}
	switch args[0] {
	case "-h", "--help", "help":
		fmt.Fprint(stdout, help)
		return exitOK
	}
	for _, a := range actions {
		if a.name == args[0] {
			return a.run(args[1:], stdout, stderr)
		}
	}
	return cliProblems(stderr, cmd, fmt.Sprintf("unknown action %q: say %s", args[0], orList(names)))
}

// orList joins words as "a, b or c".
func orList(words []string) string {
	if len(words) < 2 {
		return strings.Join(words, "")
	}
	return strings.Join(words[:len(words)-1], ", ") + " or " + words[len(words)-1]
}
