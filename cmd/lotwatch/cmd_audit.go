package main

import (
	"context"
	"fmt"
	"io"
)

func init() {
	register(command{
		name:    "audit",
		summary: "verify the audit trail of a database",
		run:     runAudit,
	})
}

const auditHelp = `Usage: lotwatch audit verify --db FILE

Checks the audit trail, the append-only record of every change: each entry
carries the SHA-256 of the one before and of its own content, and the last
one is noted separately. An entry edited, inserted or removed behind
lotwatch's back (also the last one) breaks the chain. Then every stored
row the trail covers — lots with their category counts and revisions,
processes, limit sets, annotations, users' role, active state and password
hash, tokens and their hashes — is compared with the latest entry about
it, so that a row edited, added or removed with plain SQL is named.
Sign-in sessions are not covered: a session row added behind lotwatch's
back is not found (whoever can write the file can do that and more; keep
it readable by its owner only). The hash of the last entry is printed:
note it elsewhere (e.g. in the weekly review) to tell later whether the
whole trail was rewritten.

Options:
  --db FILE   the lotwatch database file, or a postgres:// URL

Exit status: 0 when the chain and the rows hold, 1 when not (the first
broken entry or row is named), 2 for bad input.
`

func runAudit(args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	if len(args) == 0 {
		return cliProblems(stderr, "audit", `say "verify" (run "lotwatch audit -h" for the options)`)
	}
	switch args[0] {
	case "-h", "--help", "help":
		fmt.Fprint(stdout, auditHelp)
		return exitOK
	case "verify":
	default:
		return cliProblems(stderr, "audit", fmt.Sprintf("unknown action %q: say verify", args[0]))
	}
	fs := cliFlags("audit verify")
	dbPath := fs.String("db", "", "")
	pos, code, done := cliParse(fs, args[1:], auditHelp, stdout, stderr)
	if done {
		return code
	}
	probs := cliRequire("audit", "db", *dbPath)
	probs = append(probs, cliNoArgs(pos)...)
	if len(probs) > 0 {
		return cliProblems(stderr, "audit verify", probs...)
	}
	if cliNoFile(*dbPath) {
		return cliProblems(stderr, "audit verify", fmt.Sprintf("--db %s: no such database file", *dbPath))
	}
	db, code, ok := cliOpen(stderr, "audit verify", *dbPath)
	if !ok {
		return code
	}
	defer db.Close()
	chk, err := db.VerifyAudit(context.Background())
	if err != nil {
		fmt.Fprintf(stderr, "lotwatch audit verify: %v\n", err)
		return exitFail
	}
	if !chk.OK && chk.Entity != "" {
		fmt.Fprintf(stdout, "audit trail BROKEN: %s\n", chk.Why)
		return exitFail
	}
	if !chk.OK {
		fmt.Fprintf(stdout, "audit trail BROKEN at entry %d: %s\n", chk.FirstBroken, chk.Why)
		return exitFail
	}
	fmt.Fprintf(stdout, "audit trail holds: %d entries, last hash %s\n", chk.Entries, chk.Head)
	return exitOK
}
