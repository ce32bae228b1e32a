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
		name:    "backup",
		summary: "copy the database to a file, also while the server runs",
		run:     runBackup,
	})
	register(command{
		name:    "restore",
		summary: "replace the database with a checked backup",
		run:     runRestore,
	})
}

const backupHelp = `Usage: lotwatch backup --db FILE --to BACKUP

Copies the database to BACKUP as one consistent snapshot with SQLite's
online backup, while the server may go on logging lots. The copy is
written beside BACKUP first and renamed into place when complete. A
PostgreSQL database (--db postgres://…) is written to BACKUP as a SQLite
file with the same record, from one snapshot, so the backup opens
anywhere.

Options:
  --db FILE    the lotwatch database file, or a postgres:// URL
  --to BACKUP  the file to write (replaced if it exists)

Exit status: 0 when done, 2 for bad input, 1 when the copy fails.
`

const restoreHelp = `Usage: lotwatch restore --db FILE --from BACKUP

Replaces the database with BACKUP. First BACKUP is checked: SQLite's
integrity check must pass, it must be a lotwatch database no newer than
this program, and its audit trail must be unbroken; if not, nothing is
replaced. The replaced database is kept beside it as
FILE.before-restore-TIME. Stop the server before restoring: while any
program has FILE open (a running lotwatch serve, or another command still
working) the restore is refused and nothing is replaced.

Into PostgreSQL (--db postgres://…) the record is replaced in one
transaction, refused while any other session is connected to the
database; a record it replaces is first kept as a SQLite file
before-restore-TIME.db beside BACKUP.

Options:
  --db FILE       the lotwatch database file to replace (made if missing), or a postgres:// URL
  --from BACKUP   the backup file to restore

Exit status: 0 when done, 2 for bad input or a backup that fails its
checks (nothing replaced), 1 when FILE is in use (nothing replaced) or
replacing fails.
`

func runBackup(args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	fs := cliFlags("backup")
	dbPath := fs.String("db", "", "")
	to := fs.String("to", "", "")
	pos, code, done := cliParse(fs, args, backupHelp, stdout, stderr)
	if done {
		return code
	}
	probs := cliRequire("backup", "db", *dbPath, "to", *to)
	probs = append(probs, cliNoArgs(pos)...)
	if len(probs) > 0 {
		return cliProblems(stderr, "backup", probs...)
	}
	if cliNoFile(*dbPath) {
		return cliProblems(stderr, "backup", fmt.Sprintf("--db %s: no such database file", *dbPath))
	}
	db, code, ok := cliOpen(stderr, "backup", *dbPath)
	if !ok {
		return code
	}
	defer db.Close()
	if err := db.Backup(context.Background(), *to); err != nil {
		fmt.Fprintf(stderr, "lotwatch backup: %v\n", err)
		return exitFail
	}
	fmt.Fprintf(stdout, "backed up %s to %s\n", store.Redact(*dbPath), *to)
	return exitOK
}

func runRestore(args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	fs := cliFlags("restore")
	dbPath := fs.String("db", "", "")
	from := fs.String("from", "", "")
	pos, code, done := cliParse(fs, args, restoreHelp, stdout, stderr)
	if done {
		return code
	}
	probs := cliRequire("restore", "db", *dbPath, "from", *from)
	probs = append(probs, cliNoArgs(pos)...)
	if len(probs) > 0 {
		return cliProblems(stderr, "restore", probs...)
	}
	ctx := context.Background()
	chk, err := store.CheckFile(ctx, *from)
	if err != nil {
		return cliProblems(stderr, "restore", fmt.Sprintf("--from %s: %v; nothing replaced", *from, err))
	}
	if !chk.OK {
		return cliProblems(stderr, "restore", fmt.Sprintf("--from %s: audit trail broken at entry %d: %s; nothing replaced", *from, chk.FirstBroken, chk.Why))
	}
	kept, err := store.Restore(ctx, *dbPath, *from)
	if errors.Is(err, store.ErrInUse) {
		fmt.Fprintf(stderr, "lotwatch restore: --db %s is open in another program (a running lotwatch serve, or a command still working): stop it first; nothing was replaced\n", store.Redact(*dbPath))
		return exitFail
	}
	if err != nil {
		fmt.Fprintf(stderr, "lotwatch restore: %v\n", err)
		return exitFail
	}
	fmt.Fprintf(stdout, "restored %s from %s (%d audit entries verified)\n", store.Redact(*dbPath), *from, chk.Entries)
	if kept != "" {
		fmt.Fprintf(stdout, "the replaced database is kept as %s\n", kept)
	}
	return exitOK
}
