package web

import (
	"fmt"
	"testing"
	"time"

	"lotwatch/store"
)

// TestPooledSubgroupsOfBigLots: three lots of 4 to 5 million units on one
// day pool into a subgroup of 14 million, beyond the bound of one lot
// (spc.MaxInspected); the day and shift charts and the chart's CSV answer
// 200 with the pooled subgroup, not 500 (issue 12, fault 6).
func TestPooledSubgroupsOfBigLots(t *testing.T) {
	e := newTestEnv(t)
	loc := e.proc.Location()
	day := time.Date(2026, 3, 2, 0, 0, 0, 0, loc)
	var in []store.LotInput
	for d := 0; d < 3; d++ {
		for k := 0; k < 3; k++ {
			n := int64(4_000_000 + 500_000*k)
			in = append(in, store.LotInput{Lot: fmt.Sprintf("B%d-%d", d, k), Time: day.AddDate(0, 0, d).Add(time.Duration(6+4*k) * time.Hour),
				Shift: "early", Inspected: n, Count: n / 300})
		}
	}
	if _, err := e.db.AddLots(t.Context(), "setup", e.proc.ID, in); err != nil {
		t.Fatal(err)
	}
	c := e.signIn(t, "viewer1", testPassword)
	for _, q := range []string{"?period=all&by=day", "?period=all&by=shift"} {
		for _, path := range []string{fmt.Sprintf("/processes/%d", e.proc.ID), fmt.Sprintf("/processes/%d/chart.csv", e.proc.ID)} {
			if rec := e.do(req{method: "GET", path: path + q, cookie: c}); rec.Code != 200 {
				t.Errorf("GET %s%s: status %d: %.200s", path, q, rec.Code, rec.Body.String())
			}
		}
	}
}
