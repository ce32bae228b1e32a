package store

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"reflect"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"lotwatch/spc"
)

const sampleCSV = "\xEF\xBB\xBFLot,Time,Shift,Inspected,Defective,dent,scratch,Inspector,Note\r\n" +
	"B1,2025-03-03 06:10,early,200,4,3,1,kim,\r\n" +
	"B2,2025-03-03T14:05:00+01:00,late,180,2,,2,lee,\"two\r\nlines\"\r\n" +
	"B3,2025-03-04 06:00,early,210,0,0,0,kim,\"=HYPERLINK(\"\"x\"\")\"\r\n"

func importString(t *testing.T, db *DB, process, src string, create bool) (ImportResult, error) {
	t.Helper()
	return db.Import(ctx, "tester", strings.NewReader(src), ImportOptions{Process: process, Create: create, TimeZone: "Europe/Berlin"})
}

func TestImportCreateIdempotentConflict(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		db, _ := open(t)
		res, err := importString(t, db, "weld", sampleCSV, true)
		if err != nil {
			t.Fatal(err)
		}
		if !res.Created || res.Added != 3 || res.Process.Chart != spc.ChartP || !reflect.DeepEqual(res.Process.Categories, []string{"dent", "scratch"}) {
			t.Fatalf("result %+v", res)
		}
		lots, _ := db.Lots(ctx, res.Process.ID, time.Time{}, time.Time{})
		// 06:10 in Berlin on 3 March 2025 (CET, UTC+1) is 05:10 UTC.
		if len(lots) != 3 || !lots[0].Time.Equal(time.Date(2025, 3, 3, 5, 10, 0, 0, time.UTC)) {
			t.Fatalf("lots %+v", lots)
		}
		if _, ok := lots[1].Categories["dent"]; ok || lots[1].Categories["scratch"] != 2 || lots[1].Note != "two\nlines" {
			t.Errorf("B2 read as %+v", lots[1])
		}
		// Again: nothing added.
		res, err = importString(t, db, "weld", sampleCSV, false)
		if err != nil || res.Added != 0 || res.Unchanged != 3 || len(res.Conflicts) != 0 {
			t.Fatalf("re-import: %+v %v", res, err)
		}
		// Changed values: a problem naming the line and the fields, and
		// nothing of the file is written (all or nothing)...
		changed := strings.Replace(sampleCSV, "B1,2025-03-03 06:10,early,200,4,3,1,kim", "B1,2025-03-03 06:10,late,200,5,3,1,kim", 1) + "B4,2025-03-05 06:00,early,100,1,1,0,kim,\r\n"
		_, err = importString(t, db, "weld", changed, false)
		var ve *ValidationError
		if !errors.As(err, &ve) || len(ve.Problems) != 1 || ve.Problems[0].Line != 2 || ve.Problems[0].Value != "B1" ||
			!strings.Contains(ve.Problems[0].Reason, "already stored with other values (shift, count)") {
			t.Fatalf("conflicting import: %v, want one problem on line 2 naming B1, shift and count", err)
		}
		if n, _ := db.Lots(ctx, res.Process.ID, time.Time{}, time.Time{}); len(n) != 3 {
			t.Fatalf("a refused import stored lots: %d, want 3", len(n))
		}
		// ...unless conflicts are skipped on purpose: then the other lots go
		// in and each conflict is reported, never an overwrite.
		res, err = db.Import(ctx, "tester", strings.NewReader(changed), ImportOptions{Process: "weld", SkipConflicts: true})
		if err != nil || res.Added != 1 || res.Unchanged != 2 || len(res.Conflicts) != 1 {
			t.Fatalf("import skipping conflicts: %+v %v", res, err)
		}
		if c := res.Conflicts[0]; c.Line != 2 || c.Lot != "B1" || !reflect.DeepEqual(c.Fields, []string{"shift", "count"}) {
			t.Errorf("conflict %+v", c)
		}
		l, _ := db.LotByID(ctx, lots[0].ID)
		if l.Count != 4 || l.Shift != "early" {
			t.Errorf("stored lot overwritten: %+v", l)
		}
	})
}

func TestImportAllOrNothing(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		db, _ := open(t)
		p := addProcess(t, db, "weld", spc.ChartP, "dent")
		src := "lot,inspected,defective,dent\n" +
			"C1,100,2,1\n" + // line 2 fine
			"C2,100,101,\n" + // line 3 defective > inspected
			"C3,100,2,burr\n" + // line 4 not a number
			"C1,100,2,1\n" + // line 5 duplicate of line 2
			"C5,10,1,11\n" // line 6 category over inspected
		_, err := importString(t, db, "weld", src, false)
		var ve *ValidationError
		if !errors.As(err, &ve) {
			t.Fatalf("err %v", err)
		}
		want := []struct {
			line  int
			field string
		}{{3, "defective"}, {4, "dent"}, {5, "lot"}, {6, "dent"}}
		if len(ve.Problems) != len(want) {
			t.Fatalf("problems %v", ve.Problems)
		}
		for i, w := range want {
			if ve.Problems[i].Line != w.line || ve.Problems[i].Field != w.field {
				t.Errorf("problem %d: %+v, want line %d field %s", i, ve.Problems[i], w.line, w.field)
			}
		}
		if lots, _ := db.Lots(ctx, p.ID, time.Time{}, time.Time{}); len(lots) != 0 {
			t.Errorf("%d lots written by a refused import", len(lots))
		}
		// Unknown process without create; wrong count column for the chart.
		if _, err := importString(t, db, "nope", src, false); !errors.Is(err, ErrNotFound) {
			t.Errorf("unknown process: %v", err)
		}
		if _, err := importString(t, db, "weld", "lot,inspected,defects\nX,1,1\n", false); !errors.Is(err, ErrInvalid) {
			t.Errorf("defects column for a p chart: %v", err)
		}
		// The cap: 150 bad rows give 100 problems and "150 - 100 more".
		var b strings.Builder
		b.WriteString("lot,inspected,defective\n")
		for i := 0; i < 150; i++ {
			fmt.Fprintf(&b, "D%d,0,0\n", i)
		}
		_, err = importString(t, db, "weld", b.String(), false)
		if !errors.As(err, &ve) || len(ve.Problems) != 100 || ve.More != 50 || !strings.Contains(ve.Error(), "and 50 more") {
			t.Errorf("cap: %d problems, %d more", len(ve.Problems), ve.More)
		}
	})
}

// Export, then import into a fresh database: the same lots, including text
// that a spreadsheet would run as a formula.
func TestExportImportRoundTrip(t *testing.T) {
	forEachBackend(t, func(t *testing.T, open opener) {
		db, _ := open(t)
		p, err := db.AddProcess(ctx, "t", Process{Name: "paint", Chart: spc.ChartU, Categories: []string{"run", "sag"}, TimeZone: "America/Chicago"})
		if err != nil {
			t.Fatal(err)
		}
		t0 := time.Date(2025, 7, 1, 13, 14, 15, 123456789, time.UTC)
		in := []LotInput{
			{Lot: "=1+2", Time: t0, Shift: "+night", Inspected: 5, Count: 9, Categories: map[string]int64{"run": 9}, Inspector: "@ana", Note: "-minus"},
			{Lot: "'=quoted", Time: t0.Add(time.Minute), Inspected: 5, Count: 0, Note: "\ttab"},
			{Lot: "'plain", Time: t0.Add(2 * time.Minute), Inspected: 7, Count: 1, Categories: map[string]int64{"run": 0, "sag": 1}, Note: "line\nbreak, \"quoted\""},
			{Lot: "L4", Time: t0.Add(3 * time.Minute), Inspected: 1, Count: 0, Note: "\rcr"},
		}
		if _, err := db.AddLots(ctx, "t", p.ID, in); err != nil {
			t.Fatal(err)
		}
		var out bytes.Buffer
		if err := db.Export(ctx, &out, p.ID, ExportOptions{}); err != nil {
			t.Fatal(err)
		}
		for _, bad := range []string{"\n=1+2", ",+night", ",@ana", ",-minus"} {
			if strings.Contains(out.String(), bad) {
				t.Errorf("export has an unguarded cell %q:\n%s", bad, out.String())
			}
		}
		db2, _ := open(t)
		if _, err := db2.AddProcess(ctx, "t", Process{Name: "paint", Chart: spc.ChartU, Categories: []string{"run", "sag"}, TimeZone: "America/Chicago"}); err != nil {
			t.Fatal(err)
		}
		res, err := db2.Import(ctx, "t", bytes.NewReader(out.Bytes()), ImportOptions{Process: "paint"})
		if err != nil || res.Added != len(in) {
			t.Fatalf("import of export: %+v %v\n%s", res, err, out.String())
		}
		a, _ := db.Lots(ctx, p.ID, time.Time{}, time.Time{})
		b, _ := db2.Lots(ctx, res.Process.ID, time.Time{}, time.Time{})
		for i := range a {
			if !a[i].Time.Equal(b[i].Time) {
				t.Errorf("lot %d time %v, read back %v", i, a[i].Time, b[i].Time)
			}
			a[i].Time, b[i].Time = time.Time{}, time.Time{}
			if !reflect.DeepEqual(a[i].LotInput, b[i].LotInput) {
				t.Errorf("lot %d: %+v\nread back %+v", i, a[i].LotInput, b[i].LotInput)
			}
		}
		// And into the same database: all unchanged.
		res, err = db.Import(ctx, "t", bytes.NewReader(out.Bytes()), ImportOptions{Process: "paint"})
		if err != nil || res.Unchanged != len(in) || res.Added != 0 || len(res.Conflicts) != 0 {
			t.Errorf("re-import of export: %+v %v", res, err)
		}
		// Date range and JSON.
		out.Reset()
		if err := db.Export(ctx, &out, p.ID, ExportOptions{From: t0.Add(time.Minute), To: t0.Add(3 * time.Minute), Format: "json"}); err != nil {
			t.Fatal(err)
		}
		if n := strings.Count(out.String(), `"lot":`); n != 2 || !strings.Contains(out.String(), `"defects":9`) == strings.Contains(out.String(), `"lot":"=1+2"`) {
			t.Errorf("json range export:\n%s", out.String())
		}
	})
}

// generateCSV writes n valid lots of a p chart with two categories.
func generateCSV(w io.Writer, n int) {
	fmt.Fprintln(w, "lot,time,shift,inspected,defective,dent,scratch,inspector,note")
	t0 := time.Date(2020, 1, 1, 0, 0, 0, 0, time.UTC)
	for i := 0; i < n; i++ {
		d := i % 7
		fmt.Fprintf(w, "L%08d,%s,%s,200,%d,%d,%d,kim,\n", i, t0.Add(time.Duration(i)*time.Minute).Format(time.RFC3339), [3]string{"early", "late", "night"}[i%3], d, d/2, d-d/2)
	}
}

// A kill -9 in the middle of a large import leaves nothing of it: the
// import runs in a child process (this test binary re-executed), which is
// killed once it has read well into the file.
//
// SQLite only: kills a process holding the file; PostgreSQL crashes are in cmd/lotwatch TestPostgresCrash.
func TestImportKilled(t *testing.T) {
	if path := os.Getenv("LOTWATCH_KILL_IMPORT_DB"); path != "" {
		db, err := Open(path)
		if err != nil {
			fmt.Println("open:", err)
			os.Exit(3)
		}
		pr, pw := io.Pipe()
		go func() { generateCSV(pw, 2_000_000); pw.Close() }()
		_, err = db.Import(context.Background(), "child", pr, ImportOptions{Process: "weld",
			Progress: func(rows int, _ int64) {
				if rows >= 100_000 {
					fmt.Println("progress", rows)
				}
			}})
		fmt.Println("import finished:", err)
		os.Exit(4)
	}
	path := filepath.Join(t.TempDir(), "kill.db")
	db, err := Open(path)
	if err != nil {
		t.Fatal(err)
	}
	p := addProcess(t, db, "weld", spc.ChartP, "dent", "scratch")
	if _, err := db.AddLots(ctx, "t", p.ID, []LotInput{{Lot: "before", Inspected: 10, Count: 1}}); err != nil {
		t.Fatal(err)
	}
	db.Close()

	cmd := exec.Command(os.Args[0], "-test.run=^TestImportKilled$")
	cmd.Env = append(os.Environ(), "LOTWATCH_KILL_IMPORT_DB="+path)
	stdout, _ := cmd.StdoutPipe()
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	buf := make([]byte, 4096)
	var seen strings.Builder
	for !strings.Contains(seen.String(), "progress") {
		n, err := stdout.Read(buf)
		seen.Write(buf[:n])
		if err != nil {
			t.Fatalf("child ended before the kill: %q", seen.String())
		}
	}
	cmd.Process.Kill() // SIGKILL
	cmd.Wait()

	db, err = Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	lots, err := db.Lots(ctx, p.ID, time.Time{}, time.Time{})
	if err != nil || len(lots) != 1 || lots[0].Lot != "before" {
		t.Fatalf("after kill: %d lots (%v)", len(lots), err)
	}
	if chk, err := db.VerifyAudit(ctx); err != nil || !chk.OK {
		t.Errorf("audit after kill: %+v %v", chk, err)
	}
}

// Back up while 4 writers log lots, then restore the backup over the
// database: it opens, its audit chain holds, and it has every lot that was
// acknowledged before the backup started.
//
// SQLite only: SQLite online backup and file restore; PostgreSQL backup and restore are in TestCopyBetweenBackends and cmd/lotwatch TestTwoServersOnePostgres.
func TestBackupWhileWritingRestore(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "live.db")
	db, err := Open(path)
	if err != nil {
		t.Fatal(err)
	}
	p := addProcess(t, db, "weld", spc.ChartP)
	var acked atomic.Int64
	var wg sync.WaitGroup
	stop := make(chan struct{})
	for w := 0; w < 4; w++ {
		wg.Add(1)
		go func(w int) {
			defer wg.Done()
			for i := 0; ; i++ {
				select {
				case <-stop:
					return
				default:
				}
				if _, err := db.AddLots(ctx, "w", p.ID, []LotInput{{Lot: fmt.Sprintf("%d-%d", w, i), Inspected: 10, Count: 1}}); err != nil {
					t.Error(err)
					return
				}
				acked.Add(1)
				if i == 300 {
					return
				}
			}
		}(w)
	}
	for acked.Load() < 200 {
		time.Sleep(time.Millisecond)
	}
	before := acked.Load()
	backup := filepath.Join(dir, "copy.db")
	if err := db.Backup(ctx, backup); err != nil {
		t.Fatal(err)
	}
	close(stop)
	wg.Wait()
	db.Close()

	kept, err := Restore(ctx, path, backup)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := os.Stat(kept); err != nil {
		t.Errorf("replaced database not kept: %v", err)
	}
	db, err = Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	lots, _ := db.Lots(ctx, p.ID, time.Time{}, time.Time{})
	if int64(len(lots)) < before {
		t.Errorf("backup has %d lots, %d were acknowledged before it", len(lots), before)
	}
	if chk, err := db.VerifyAudit(ctx); err != nil || !chk.OK || chk.Entries != len(lots)+1 {
		t.Errorf("restored audit: %+v %v (lots %d)", chk, err, len(lots))
	}

	// A damaged backup is refused and nothing is replaced.
	raw := rawSQL(t, backup)
	raw.Exec("UPDATE audit SET actor = 'x' WHERE seq = 3")
	raw.Close()
	if _, err := Restore(ctx, path, backup); err == nil {
		t.Error("restore of a backup with a broken audit chain")
	}
	if err := os.WriteFile(filepath.Join(dir, "junk.db"), []byte("not a database at all, just text padding padding"), 0o600); err != nil {
		t.Fatal(err)
	}
	if _, err := Restore(ctx, path, filepath.Join(dir, "junk.db")); err == nil {
		t.Error("restore of a non-database")
	}
}
