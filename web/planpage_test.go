package web

import (
	"encoding/json"
	"fmt"
	"strings"
	"testing"
)

// TestPlanPageFloorAndWords checks the planning page on a process whose
// centre is 2%: the lot size it recommends keeps ARL0 at the default
// floor of 100 lots or more; a lot size with no possible low signal says
// so in words, never as −1 or a negative limit; lowering the floor gives a
// warning; the ARL curves are an ECharts data block with the floor line.
func TestPlanPageFloorAndWords(t *testing.T) {
	e := newTestEnv(t)
	e.addLots(t, 40, func(i int) int64 { return 4 }) // 4 of 200 each: p̄ = 0.02
	c := e.signIn(t, "viewer1", testPassword)
	get := func(q string) string {
		t.Helper()
		rec := e.do(req{method: "GET", path: fmt.Sprintf("/plan?process=%d&%s", e.proc.ID, q), cookie: c})
		if rec.Code != 200 {
			t.Fatalf("%s: status %d: %s", q, rec.Code, rec.Body.String())
		}
		return rec.Body.String()
	}
	// p0 = 0.02, p1 = 0.06, target 2 lots: 111 units with ARL0 140.0
	// (spc/testdata/intervals_reference.json, smallest_n_floor, by scipy);
	// without the floor the search would give 95 with ARL0 below 100.
	body := get("p1=0.06&arl1=2")
	for _, want := range []string{"111 (smallest meeting the target)", "140.01", "no lot can signal low at this size",
		`data-chart-options="plan-options"`, "false alarms at most once in 100 lots"} {
		if !strings.Contains(body, want) {
			t.Errorf("page lacks %q", want)
		}
	}
	for _, bad := range []string{">-1<", "−1", "Warning:"} {
		if strings.Contains(body, bad) {
			t.Errorf("page shows %q", bad)
		}
	}
	const open = `<script type="application/json" id="plan-options">`
	i := strings.Index(body, open)
	j := strings.Index(body[i+1:], "</script>")
	if i < 0 || j < 0 {
		t.Fatal("no plan chart data block")
	}
	var opt struct {
		Series []struct {
			Name     string `json:"name"`
			MarkLine struct {
				Data []struct {
					Name  string  `json:"name"`
					YAxis float64 `json:"yAxis"`
				} `json:"data"`
			} `json:"markLine"`
		} `json:"series"`
	}
	if err := json.Unmarshal([]byte(body[i+len(open):i+1+j]), &opt); err != nil {
		t.Fatalf("plan chart options are not JSON: %v", err)
	}
	if len(opt.Series) != 2 || len(opt.Series[0].MarkLine.Data) == 0 || opt.Series[0].MarkLine.Data[0].YAxis != 100 {
		t.Errorf("plan chart: %+v, want ARL1 and ARL0 series and the floor at 100", opt)
	}
	// n = 3: any nonconforming unit signals, ARL0 = 1/(1 − 0.98³) = 17.0
	// (hand arithmetic), below the floor: a warning. A lowered floor
	// warns too.
	body = get("p1=0.06&n=3&arl1=2&min_arl0=10")
	for _, want := range []string{"Warning: The floor on false alarms is lowered", "Warning: At 3 units per lot", "17.00"} {
		if !strings.Contains(body, want) {
			t.Errorf("page lacks %q", want)
		}
	}
	rec := e.do(req{method: "GET", path: fmt.Sprintf("/plan?process=%d&p1=0.06&arl1=2&min_arl0=0", e.proc.ID), cookie: c})
	if rec.Code != 400 || !strings.Contains(rec.Body.String(), "min_arl0") {
		t.Errorf("min_arl0=0: status %d", rec.Code)
	}
}
