package web

import (
	"context"
	"net"
	"testing"
	"time"
)

// TestServeJudgesPlantAtStart: a server that starts serving judges every
// active process's record in the background and keeps the summaries the
// board and the review read, so that the first board after a start does
// not judge them while someone waits; the summaries are those the board
// itself would build.
func TestServeJudgesPlantAtStart(t *testing.T) {
	e := newTestEnv(t)
	e.addLots(t, 30, func(i int) int64 { return int64(1 + i%4) })
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- e.srv.Serve(ctx, ln) }()
	defer func() {
		cancel()
		if err := <-done; err != nil {
			t.Errorf("Serve: %v", err)
		}
	}()
	deadline := time.Now().Add(30 * time.Second)
	for {
		if n, _ := e.srv.summaries.size(); n == 1 {
			break
		}
		if time.Now().After(deadline) {
			t.Fatal("no summary kept 30 s after the server started")
		}
		time.Sleep(10 * time.Millisecond)
	}
	e.srv.summaries.mu.Lock()
	kept := e.srv.summaries.sum[e.proc.ID]
	e.srv.summaries.mu.Unlock()
	v, err := e.db.LotsVersion(ctx, e.proc.ID)
	if err != nil {
		t.Fatal(err)
	}
	pc, err := e.srv.freshChart(ctx, e.proc)
	if err != nil {
		t.Fatal(err)
	}
	want, err := summarize(pc, v)
	if err != nil {
		t.Fatal(err)
	}
	if kept == nil || kept.version != v || kept.count != 30 || len(kept.flagged.Lots) != len(want.flagged.Lots) || kept.size() != want.size() {
		t.Errorf("summary kept at start %+v, want %+v", kept, want)
	}
}
