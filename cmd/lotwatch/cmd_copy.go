package main

import (
	"context"
	"errors"
	"fmt"
	"io"

	"lotwatch/store"
)

func init() {
	register(command{
		name:    "copy",
		summary: "move a whole plant's record to another database (a file or a PostgreSQL URL)",
		run:     runCopy,
	})
}

const copyHelp = `Usage: lotwatch copy --from DB --to DB

Copies the whole record of one lotwatch database into another, empty one:
processes, lots with their revisions, limit sets, annotations, users,
tokens, alert rules and their deliveries, plant settings and the audit
trail, every row with its id, in one transaction. Each DB is a database
file (SQLite) or a postgres:// URL, so a plant's file moves to PostgreSQL
and back. The audit trail of the copy is checked before success is
reported.

Options:
  --from DB   the database to copy (a file or a URL)
  --to DB     the empty database to fill (a file or a URL; made if missing)

Exit status: 0 when copied and the copy's audit check holds, 2 for bad
input (also a destination that is not empty: nothing was written), 1 when
the copy or its check fails.
`

func runCopy(args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	fs := cliFlags("copy")
	from := fs.String("from", "", "")
	to := fs.String("to", "", "")
	pos, code, done := cliParse(fs, args, copyHelp, stdout, stderr)
	if done {
		return code
	}
	probs := append(cliRequire("copy", "from", *from, "to", *to), cliNoArgs(pos)...)
	if *from != "" && cliNoFile(*from) {
		probs = append(probs, fmt.Sprintf("--from %s: no such database file", *from))
	}
	if *from != "" && *from == *to {
		probs = append(probs, "--from and --to name the same database")
	}
	if len(probs) > 0 {
		return cliProblems(stderr, "copy", probs...)
	}
	chk, err := store.CopyDatabase(context.Background(), *from, *to)
	if errors.Is(err, store.ErrNotEmpty) {
		fmt.Fprintf(stderr, "lotwatch copy: %v; nothing was written\n", err)
		return exitUsage
	}
	if err != nil {
		return cliStoreError(stderr, "copy", "", err)
	}
	fmt.Fprintf(stdout, "copied %s to %s: audit trail verified, %d entries, head %s\n", store.Redact(*from), store.Redact(*to), chk.Entries, chk.Head)
	return exitOK
}
