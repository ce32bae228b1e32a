package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"os/signal"
	"path/filepath"
	"syscall"
	"time"

	"lotwatch/spc"
	"lotwatch/store"
	"lotwatch/web"
)

func init() {
	register(command{
		name:    "demo",
		summary: "build the demo plant's database (if missing) and serve it",
		run:     runDemo,
	})
}

// demoUsers are the demo sign-ins, one per role. The passwords are printed
// at start-up; they are for the demo database only.
var demoUsers = []struct {
	name, password string
	role           store.Role
}{
	{"viewer", "demo-viewer", store.RoleViewer},
	{"inspector", "demo-inspector", store.RoleInspector},
	{"engineer", "demo-engineer", store.RoleEngineer},
	{"admin", "demo-admin", store.RoleAdmin},
}

func runDemo(args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	fs := cliFlags("demo")
	dbPath := fs.String("db", "lotwatch-demo.db", "the demo database `file`; created with the demo plant when it does not exist")
	addr := fs.String("addr", "127.0.0.1:8080", "the `address` to serve on (host:port)")
	csvDir := fs.String("csv", "", "write the demo plant's lots as one CSV file per process into `dir` and stop, without a database or server")
	help := cliHelp(fs, `Usage: lotwatch demo [--db FILE] [--addr HOST:PORT] [--csv DIR]

Builds the database of Quillmoor Works, an invented plant with four processes
and thirteen weeks of lots drawn from a fixed seed (a drift on the harness line,
a spike with its recorded assignable cause on the housing line, frozen limit
sets on some processes and trial limits on others, one sign-in per role), then
serves it. An existing database file is served as it is; delete it to start
the demo afresh. The lots end on 27 November 2026 and the server's clock
starts there, so that the pages show the same lots, with the same values,
as testdata/demo and the README's worked example.

Options:
`, "\n"+caution)
	pos, code, done := cliParse(fs, args, help, stdout, stderr)
	if done {
		return code
	}
	if len(pos) > 0 {
		return cliProblems(stderr, "demo", cliNoArgs(pos)...)
	}
	started := time.Now()
	if *csvDir != "" {
		if err := writeDemoCSV(*csvDir, demoPlant(demoEnd, demoSeed)); err != nil {
			fmt.Fprintf(stderr, "lotwatch demo: %v\n", err)
			return exitFail
		}
		fmt.Fprintf(stdout, "demo lots written to %s\n", *csvDir)
		return exitOK
	}

	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()

	_, statErr := os.Stat(*dbPath)
	fresh := errors.Is(statErr, os.ErrNotExist)
	db, err := store.Open(*dbPath)
	if err != nil {
		fmt.Fprintf(stderr, "lotwatch demo: %v\n", err)
		return exitFail
	}
	defer db.Close()
	if fresh {
		fmt.Fprintf(stdout, "building the demo plant in %s …\n", *dbPath)
		if err := seedDemo(ctx, db, demoPlant(demoEnd, demoSeed)); err != nil {
			db.Close()
			os.Remove(*dbPath)
			fmt.Fprintf(stderr, "lotwatch demo: %v\n", err)
			return exitFail
		}
	}

	srv, err := web.NewServer(web.Config{DB: db, Addr: *addr, Now: demoClock(started)})
	if err != nil {
		fmt.Fprintf(stderr, "lotwatch demo: %v\n", err)
		return exitFail
	}
	fmt.Fprintf(stdout, "\nlotwatch demo: Quillmoor Works (an invented plant)\n  open http://%s/ and sign in as one of:\n", *addr)
	for _, u := range demoUsers {
		fmt.Fprintf(stdout, "    %-10s password %-16s (%s)\n", u.name, u.password, u.role)
	}
	fmt.Fprintf(stdout, "  the demo's clock starts at %s, the end of its lots\n", demoEnd.Format("2006-01-02 15:04 MST"))
	fmt.Fprintf(stdout, "  database: %s; stop with Ctrl-C\n\n%s", *dbPath, caution)
	if err := srv.ListenAndServe(ctx); err != nil {
		fmt.Fprintf(stderr, "lotwatch demo: %v\n", err)
		return exitFail
	}
	return exitOK
}

// seedDemo writes the demo plant into an empty database: users, processes,
// lots, the frozen limit sets and the recorded causes.
func seedDemo(ctx context.Context, db *store.DB, plant []demoProcess) error {
	const admin = "admin"
	for _, u := range demoUsers {
		if _, err := db.AddUser(ctx, admin, u.name, u.role, u.password); err != nil {
			return fmt.Errorf("demo user %s: %w", u.name, err)
		}
	}
	if err := db.SetPlantTimeZone(ctx, "engineer", "Quillmoor Works runs on Berlin time", demoZone); err != nil {
		return fmt.Errorf("demo time zone: %w", err)
	}
	for _, dp := range plant {
		p, err := db.AddProcess(ctx, "engineer", store.Process{
			Name: dp.Name, Description: dp.Description, Chart: dp.Chart, Method: dp.Method,
			K: 3, Rules: dp.Rules, Categories: dp.Categories, TimeZone: demoZone, Active: true,
		})
		if err != nil {
			return fmt.Errorf("demo process %s: %w", dp.Name, err)
		}
		in := make([]store.LotInput, len(dp.Lots))
		for i, l := range dp.Lots {
			in[i] = store.LotInput{Lot: l.Code, Time: l.Time, Shift: l.Shift, Inspected: l.Inspected,
				Count: l.Count, Categories: l.Categories, Inspector: l.Inspector, Note: l.Note}
		}
		stored, err := db.AddLots(ctx, "inspector", p.ID, in)
		if err != nil {
			return fmt.Errorf("demo lots of %s: %w", dp.Name, err)
		}
		ids := make(map[string]int64, len(stored))
		for _, l := range stored {
			ids[l.Lot] = l.ID
		}
		if dp.FreezeAfter > 0 {
			if err := freezeDemoLimits(ctx, db, p, dp); err != nil {
				return err
			}
		}
		for _, c := range dp.Causes {
			a, err := db.AddAnnotation(ctx, "inspector", store.Annotation{ProcessID: p.ID, LotID: ids[c.Lot], Cause: c.Cause})
			if err != nil {
				return fmt.Errorf("demo cause on %s: %w", c.Lot, err)
			}
			if c.Closed {
				if err := db.CloseAnnotation(ctx, "engineer", a.ID, c.Action); err != nil {
					return fmt.Errorf("demo cause on %s: %w", c.Lot, err)
				}
			}
		}
	}
	return nil
}

// freezeDemoLimits computes trial limits from the first FreezeAfter weeks
// of a demo process and freezes them as limit set 1, in force from the
// start of the baseline.
func freezeDemoLimits(ctx context.Context, db *store.DB, p store.Process, dp demoProcess) error {
	start := dp.Lots[0].Time
	end := start.AddDate(0, 0, 7*dp.FreezeAfter)
	var base []spc.Lot
	var last time.Time
	for _, l := range dp.Lots {
		if !l.Time.Before(end) {
			break
		}
		base = append(base, spc.Lot{Code: l.Code, Inspected: l.Inspected, Count: l.Count})
		last = l.Time
	}
	a, err := spc.Analyze(base, spc.Config{Chart: dp.Chart, Method: dp.Method, K: 3})
	if err != nil {
		return fmt.Errorf("demo limits of %s: %w", dp.Name, err)
	}
	_, err = db.FreezeLimitSet(ctx, "engineer", store.LimitSet{
		ProcessID: p.ID, Method: dp.Method, K: 3, Center: a.Rate, SigmaZ: a.SigmaZ,
		BaselineFrom: start, BaselineTo: last, BaselineLots: a.Baseline,
		EffectiveFrom: start,
		Reason:        fmt.Sprintf("Limits from the first %d weeks of production; no assignable cause found in the baseline.", dp.FreezeAfter),
	})
	if err != nil {
		return fmt.Errorf("demo limit set of %s: %w", dp.Name, err)
	}
	return nil
}

// writeDemoCSV writes one import-ready CSV file per demo process.
func writeDemoCSV(dir string, plant []demoProcess) error {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return err
	}
	for _, dp := range plant {
		name := filepath.Join(dir, demoFileName(dp.Name))
		if err := os.WriteFile(name, demoCSV(dp), 0o644); err != nil {
			return err
		}
	}
	return nil
}
