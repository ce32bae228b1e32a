package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"runtime/debug"

	"lotwatch/store"
)

func init() {
	register(command{
		name:    "version",
		summary: "the version, source revision and build time of this lotwatch (and a database's schema)",
		run:     runVersion,
	})
}

const versionHelp = `Usage: lotwatch version [--db FILE]
       lotwatch -version

Prints the module version, the source revision and the build time of this
program (as the Go toolchain recorded them), and the schema version it
writes. With --db, also the schema version of that database file (read
without changing it). Support asks for this.

Exit status: 0, or 2 when --db names a file that is not a lotwatch database.
`

// buildFacts are what the Go toolchain recorded about the build.
type buildFacts struct {
	version, revision, time string
	modified                bool
	goVersion               string
}

// readBuild reads the build facts; unknown ones stay "unknown" (a test
// binary, or a build outside version control).
func readBuild() buildFacts {
	b := buildFacts{version: "unknown", revision: "unknown", time: "unknown", goVersion: "unknown"}
	info, ok := debug.ReadBuildInfo()
	if !ok {
		return b
	}
	b.goVersion = info.GoVersion
	if v := info.Main.Version; v != "" {
		b.version = v
	}
	for _, s := range info.Settings {
		switch s.Key {
		case "vcs.revision":
			b.revision = s.Value
		case "vcs.time":
			b.time = s.Value
		case "vcs.modified":
			b.modified = s.Value == "true"
		}
	}
	return b
}

func runVersion(args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	fs := cliFlags("version")
	dbPath := fs.String("db", "", "")
	pos, code, done := cliParse(fs, args, versionHelp, stdout, stderr)
	if done {
		return code
	}
	if probs := cliNoArgs(pos); len(probs) > 0 {
		return cliProblems(stderr, "version", probs...)
	}
	b := readBuild()
	rev := b.revision
	if b.modified {
		rev += " (with uncommitted changes)"
	}
	fmt.Fprintf(stdout, "lotwatch %s\n", b.version)
	fmt.Fprintf(stdout, "revision:   %s\n", rev)
	fmt.Fprintf(stdout, "build time: %s (time of the revision)\n", b.time)
	fmt.Fprintf(stdout, "go:         %s\n", b.goVersion)
	fmt.Fprintf(stdout, "schema:     %d (the version this build writes)\n", store.SchemaVersion())
	if *dbPath != "" {
		v, err := store.FileSchemaVersion(context.Background(), *dbPath)
		if errors.Is(err, store.ErrUnreachable) {
			fmt.Fprintf(stderr, "lotwatch version: %v\n", err)
			return exitFail
		}
		if err != nil {
			return cliProblems(stderr, "version", fmt.Sprintf("--db %s: %v", store.Redact(*dbPath), err))
		}
		note, writes := "the same", store.SchemaVersionFor(*dbPath) // PostgreSQL has its own numbering
		switch {
		case v < writes:
			note = "older: this lotwatch upgrades it when it opens it to write"
		case v > writes:
			note = "newer than this lotwatch: use a newer build"
		}
		fmt.Fprintf(stdout, "database:   %s, schema %d (%s)\n", store.Redact(*dbPath), v, note)
	}
	return exitOK
}
