package main

import (
	"bufio"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"os"
	"strconv"
	"strings"
	"text/tabwriter"
	"time"

	"golang.org/x/term"

	"lotwatch/store"
	"lotwatch/web/storejson"
)

func init() {
	register(command{
		name:    "user",
		summary: "add or list the people who sign in",
		run:     runUser,
	})
	register(command{
		name:    "token",
		summary: "create, list or revoke API tokens",
		run:     runToken,
	})
}

const userHelp = `Usage:
  lotwatch user add --db FILE --name NAME --role ROLE [--as NAME]
  lotwatch user list --db FILE [--format text|json]

"add" makes a user who signs in with a password. On a terminal the
password is asked twice without showing it; otherwise the first line of
standard input is the password. It must have at least 8 characters and
is stored only as a bcrypt hash.

Options:
  --db FILE     the lotwatch database file (created if missing), or a postgres:// URL
  --name NAME   the sign-in name (no spaces)
  --role ROLE   what the user may do; each role may do all of the ones
                before it (the table of roles in README.md):
                  viewer     read the status board, charts, lots, the worklist,
                             the weekly review and planning
                  inspector  log lots (form, CSV upload, API); correct and void
                             lots, each with a reason; record and close
                             assignable causes
                  engineer   add and change processes; set the plant's time
                             zone; freeze limit sets
                  admin      manage users and API tokens
  --as NAME     the name recorded in the audit trail (default: your user
                name on this computer)
  --format F    text (the default) or json, for list

Exit status: 0 when done, 2 for bad input (each problem on standard error),
1 when the database fails.
`

const tokenHelp = `Usage:
  lotwatch token create --db FILE --user NAME [--label TEXT] [--as NAME]
  lotwatch token list --db FILE [--format text|json]
  lotwatch token revoke --db FILE --id N [--as NAME]

An API token lets a program (e.g. a line terminal) use the web API as a
user. "create" prints the token once; only its SHA-256 is stored, so it
cannot be shown again. "revoke" stops a token for good.

Options:
  --db FILE     the lotwatch database file, or a postgres:// URL
  --user NAME   the user the token acts as
  --label TEXT  what the token is for, e.g. "line 3 terminal"
  --id N        the token number shown by list
  --format F    text (the default) or json, for list
  --as NAME     the name recorded in the audit trail (default: your user
                name on this computer)

Exit status: 0 when done, 2 for bad input, 1 when the database fails.
`

func runUser(args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	if len(args) == 0 {
		return cliProblems(stderr, "user", `say "add" or "list" (run "lotwatch user -h" for the options)`)
	}
	switch args[0] {
	case "-h", "--help", "help":
		fmt.Fprint(stdout, userHelp)
		return exitOK
	case "add":
		return runUserAdd(args[1:], stdin, stdout, stderr)
	case "list":
		return runUserList(args[1:], stdout, stderr)
	}
	return cliProblems(stderr, "user", fmt.Sprintf("unknown action %q: say add or list", args[0]))
}

// readPassword reads a password: on a terminal twice without echo, else
// the first line of stdin.
func readPassword(stdin io.Reader, stderr io.Writer) (string, error) {
	if f, ok := stdin.(*os.File); ok && term.IsTerminal(int(f.Fd())) {
		fmt.Fprint(stderr, "Password: ")
		a, err := term.ReadPassword(int(f.Fd()))
		fmt.Fprintln(stderr)
		if err != nil {
			return "", err
		}
		fmt.Fprint(stderr, "Password again: ")
		b, err := term.ReadPassword(int(f.Fd()))
		fmt.Fprintln(stderr)
		if err != nil {
			return "", err
		}
		if string(a) != string(b) {
			return "", fmt.Errorf("the two passwords differ")
		}
		return string(a), nil
	}
	line, err := bufio.NewReader(stdin).ReadString('\n')
	if err != nil && (err != io.EOF || line == "") {
		return "", fmt.Errorf("no password on standard input (give it as the first line)")
	}
	return strings.TrimRight(line, "\r\n"), nil
}

func runUserAdd(args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	fs := cliFlags("user add")
	dbPath := fs.String("db", "", "")
	name := fs.String("name", "", "")
	role := fs.String("role", "", "")
	as := fs.String("as", "", "")
	pos, code, done := cliParse(fs, args, userHelp, stdout, stderr)
	if done {
		return code
	}
	probs := cliRequire("user add", "db", *dbPath, "name", *name, "role", *role)
	r, err := store.ParseRole(*role)
	if err != nil && *role != "" {
		probs = append(probs, fmt.Sprintf("--role %q: want viewer, inspector, engineer or admin", *role))
	}
	probs = append(probs, cliNoArgs(pos)...)
	if len(probs) > 0 {
		return cliProblems(stderr, "user add", probs...)
	}
	if err := store.CheckUserName(*name); err != nil {
		return cliStoreError(stderr, "user add", "", err)
	}
	pw, err := readPassword(stdin, stderr)
	if err != nil {
		return cliProblems(stderr, "user add", "password: "+err.Error())
	}
	db, code, ok := cliOpen(stderr, "user add", *dbPath)
	if !ok {
		return code
	}
	defer db.Close()
	u, err := db.AddUser(context.Background(), cliActor(*as), *name, r, pw)
	if err != nil {
		return cliStoreError(stderr, "user add", "", err)
	}
	fmt.Fprintf(stdout, "added user %q (%s)\n", u.Name, u.Role)
	return exitOK
}

func runUserList(args []string, stdout, stderr io.Writer) int {
	fs := cliFlags("user list")
	dbPath := fs.String("db", "", "")
	format := fs.String("format", "text", "")
	pos, code, done := cliParse(fs, args, userHelp, stdout, stderr)
	if done {
		return code
	}
	probs := cliRequire("user list", "db", *dbPath)
	if *format != "text" && *format != "json" {
		probs = append(probs, fmt.Sprintf("--format %q: want text or json", *format))
	}
	probs = append(probs, cliNoArgs(pos)...)
	if len(probs) > 0 {
		return cliProblems(stderr, "user list", probs...)
	}
	if cliNoFile(*dbPath) {
		return cliProblems(stderr, "user list", fmt.Sprintf("--db %s: no such database file", *dbPath))
	}
	db, code, ok := cliOpen(stderr, "user list", *dbPath)
	if !ok {
		return code
	}
	defer db.Close()
	us, err := db.Users(context.Background())
	if err != nil {
		return cliStoreError(stderr, "user list", "", err)
	}
	if *format == "json" {
		out := []storejson.User{}
		for _, u := range us {
			out = append(out, storejson.UserOf(u))
		}
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		enc.Encode(out)
		return exitOK
	}
	tw := tabwriter.NewWriter(stdout, 0, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "NAME\tROLE\tSTATE\tCREATED")
	for _, u := range us {
		state := "active"
		if !u.Active {
			state = "inactive"
		}
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\n", u.Name, u.Role, state, u.Created.Format("2006-01-02"))
	}
	tw.Flush()
	return exitOK
}

func runToken(args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	if len(args) == 0 {
		return cliProblems(stderr, "token", `say "create", "list" or "revoke" (run "lotwatch token -h" for the options)`)
	}
	action := args[0]
	switch action {
	case "-h", "--help", "help":
		fmt.Fprint(stdout, tokenHelp)
		return exitOK
	case "create", "list", "revoke":
	default:
		return cliProblems(stderr, "token", fmt.Sprintf("unknown action %q: say create, list or revoke", action))
	}
	cmd := "token " + action
	fs := cliFlags(cmd)
	dbPath := fs.String("db", "", "")
	userName := fs.String("user", "", "")
	label := fs.String("label", "", "")
	id := fs.String("id", "", "")
	as := fs.String("as", "", "")
	format := fs.String("format", "text", "")
	pos, code, done := cliParse(fs, args[1:], tokenHelp, stdout, stderr)
	if done {
		return code
	}
	probs := cliRequire(cmd, "db", *dbPath)
	if *format != "text" && *format != "json" {
		probs = append(probs, fmt.Sprintf("--format %q: want text or json", *format))
	} else if *format != "text" && action != "list" {
		probs = append(probs, "--format is for list only")
	}
	var tokenID int64
	switch action {
	case "create":
		probs = append(probs, cliRequire(cmd, "user", *userName)...)
	case "revoke":
		probs = append(probs, cliRequire(cmd, "id", *id)...)
		if *id != "" {
			n, err := strconv.ParseInt(*id, 10, 64)
			if err != nil || n <= 0 {
				probs = append(probs, fmt.Sprintf("--id %q: want the token number shown by \"lotwatch token list\"", *id))
			}
			tokenID = n
		}
	}
	probs = append(probs, cliNoArgs(pos)...)
	if len(probs) > 0 {
		return cliProblems(stderr, cmd, probs...)
	}
	if cliNoFile(*dbPath) {
		return cliProblems(stderr, cmd, fmt.Sprintf("--db %s: no such database file", *dbPath))
	}
	db, code, ok := cliOpen(stderr, cmd, *dbPath)
	if !ok {
		return code
	}
	defer db.Close()
	ctx := context.Background()
	switch action {
	case "create":
		raw, t, err := db.CreateToken(ctx, cliActor(*as), *userName, *label)
		if err != nil {
			return cliStoreError(stderr, cmd, "", err)
		}
		fmt.Fprintln(stdout, raw)
		fmt.Fprintf(stderr, "token %d for %s created; it is shown only this once\n", t.ID, t.User)
	case "revoke":
		if err := db.RevokeToken(ctx, cliActor(*as), tokenID); err != nil {
			return cliStoreError(stderr, cmd, "", err)
		}
		fmt.Fprintf(stdout, "token %d revoked\n", tokenID)
	case "list":
		ts, err := db.Tokens(ctx)
		if err != nil {
			return cliStoreError(stderr, cmd, "", err)
		}
		if *format == "json" {
			// Never the token itself: only its record.
			type tj struct {
				ID      int64  `json:"id"`
				User    string `json:"user"`
				Label   string `json:"label"`
				Created string `json:"created"`
				Revoked bool   `json:"revoked"`
			}
			out := []tj{}
			for _, t := range ts {
				out = append(out, tj{t.ID, t.User, t.Label, t.Created.Format(time.RFC3339), t.Revoked})
			}
			enc := json.NewEncoder(stdout)
			enc.SetIndent("", "  ")
			enc.Encode(out)
			return exitOK
		}
		tw := tabwriter.NewWriter(stdout, 0, 4, 2, ' ', 0)
		fmt.Fprintln(tw, "ID\tUSER\tLABEL\tCREATED\tSTATE")
		for _, t := range ts {
			state := "active"
			if t.Revoked {
				state = "revoked"
			}
			fmt.Fprintf(tw, "%d\t%s\t%s\t%s\t%s\n", t.ID, t.User, t.Label, t.Created.Format("2006-01-02 15:04"), state)
		}
		tw.Flush()
	}
	return exitOK
}
