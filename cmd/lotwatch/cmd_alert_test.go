package main

import (
	"encoding/json"
	"lotwatch/store/storetest"
	"strconv"
	"strings"
	"testing"
)

// TestCLIAlert checks the exact contract of lotwatch alert: add prints the
// id first, list --format json gives the fields without the secret,
// remove takes a rule out of the list; bad input is one line naming the
// option and value, exit 2, and stores nothing.
func TestCLIAlert(t *testing.T) {
	db := storetest.DB(t)
	if code, _, errs := runCLI(t, "", "process", "add", "--db", db, "--name", "Line 2 final", "--as", "qa"); code != exitOK {
		t.Fatalf("process add: %d %s", code, errs)
	}
	add := func(args ...string) (int, string, string) {
		return runCLI(t, "", append([]string{"alert", "add", "--db", db}, args...)...)
	}
	bad := []struct {
		args []string
		want string // the option and value the line names
	}{
		{[]string{"--process", "Nowhere", "--webhook", "http://127.0.0.1:9/", "--secret", "s"}, `--process "Nowhere"`},
		{[]string{"--process", "Line 2 final", "--webhook", "ftp://host/", "--secret", "s"}, `--webhook "ftp://host/"`},
		{[]string{"--process", "Line 2 final", "--webhook", "http://127.0.0.1:9/", "--secret", ""}, `--secret ""`},
		{[]string{"--process", "Line 2 final", "--webhook", "http://127.0.0.1:9/"}, `--secret ""`},
		{[]string{"--process", "Line 2 final", "--webhook", "http://127.0.0.1:9/", "--secret", "s", "--on", "out_of_limits,sometimes"}, `--on "sometimes"`},
		{[]string{"--process", "Line 2 final", "--webhook", "http://127.0.0.1:9/", "--secret", "s", "--on", "unexplained", "--unexplained-after", "soon"}, `--unexplained-after "soon"`},
		{[]string{"--process", "Line 2 final", "--email", "nobody"}, `--email "nobody"`},
		{[]string{"--process", "Line 2 final", "--email", "qa@plant.test", "--on", "out_of_limits", "--each-lot"}, `--each-lot "true"`},
		{[]string{"--process", "Line 2 final", "--email", "qa@plant.test", "--digest-at", "6am"}, `--digest-at "6am"`},
		{[]string{"--process", "Line 2 final", "--webhook", "http://127.0.0.1:9/", "--secret", "s", "--digest-at", "06:00"}, `--digest-at "06:00"`},
	}
	for _, tc := range bad {
		code, out, errs := add(tc.args...)
		lines := strings.Split(strings.TrimRight(errs, "\n"), "\n")
		if code != exitUsage || out != "" || len(lines) != 1 || !strings.Contains(lines[0], tc.want) {
			t.Errorf("%v: exit %d, stdout %q, stderr %q; want 2 and one line naming %s", tc.args, code, out, errs, tc.want)
		}
	}
	if _, out, _ := runCLI(t, "", "alert", "list", "--db", db, "--format", "json"); strings.TrimSpace(out) != "[]" {
		t.Fatalf("refused rules were stored: %s", out)
	}
	code, out, errs := add("--process", "Line 2 final", "--webhook", "http://10.0.0.7:8080/hook", "--secret", "top secret")
	if code != exitOK {
		t.Fatalf("add: %d %s", code, errs)
	}
	id1, err := strconv.Atoi(strings.Fields(out)[0])
	if err != nil {
		t.Fatalf("add printed %q: the id must come first", out)
	}
	code, out, errs = add("--process", "Line 2 final", "--email", "qa@plant.test", "--on", "out_of_limits,run_rule,unexplained", "--unexplained-after", "90m", "--each-lot", "--digest-at", "06:30")
	if code != exitOK {
		t.Fatalf("add e-mail: %d %s", code, errs)
	}
	id2, _ := strconv.Atoi(strings.Fields(out)[0])
	_, out, _ = runCLI(t, "", "alert", "list", "--db", db, "--format", "json")
	var got []map[string]any
	if err := json.Unmarshal([]byte(out), &got); err != nil || len(got) != 2 {
		t.Fatalf("list: %v %s", err, out)
	}
	if strings.Contains(out, "top secret") {
		t.Error("list shows a secret")
	}
	want := []string{
		`{"digest_at":"","each_lot":false,"id":` + strconv.Itoa(id1) + `,"on":["out_of_limits","run_rule","shift"],"process":"Line 2 final","target":"http://10.0.0.7:8080/hook","unexplained_after":""}`,
		`{"digest_at":"06:30","each_lot":true,"id":` + strconv.Itoa(id2) + `,"on":["out_of_limits","run_rule","unexplained"],"process":"Line 2 final","target":"qa@plant.test","unexplained_after":"1h30m"}`,
	}
	for i, g := range got {
		b, _ := json.Marshal(g)
		if string(b) != want[i] {
			t.Errorf("rule %d: %s, want %s", i, b, want[i])
		}
	}
	if code, _, errs := runCLI(t, "", "alert", "remove", "--db", db, "--id", strconv.Itoa(id1)); code != exitOK {
		t.Fatalf("remove: %d %s", code, errs)
	}
	if code, _, errs := runCLI(t, "", "alert", "remove", "--db", db, "--id", strconv.Itoa(id1)); code != exitUsage || !strings.Contains(errs, `--id "`+strconv.Itoa(id1)+`"`) {
		t.Errorf("remove twice: %d %s", code, errs)
	}
	_, out, _ = runCLI(t, "", "alert", "list", "--db", db, "--format", "json")
	if strings.Contains(out, "10.0.0.7") || !strings.Contains(out, "qa@plant.test") {
		t.Errorf("after remove: %s", out)
	}
	if code, out, _ := runCLI(t, "", "audit", "verify", "--db", db); code != exitOK {
		t.Errorf("audit verify: %d %s", code, out)
	}
}

// TestCLIAlertHosts: alert hosts prints the plant's webhook hosts, sets
// them with a reason (bad input: exit 2, one line naming the option and
// value, nothing changed), and alert add then refuses a webhook to
// another host with exit 2 naming --webhook.
func TestCLIAlertHosts(t *testing.T) {
	db := storetest.DB(t)
	if code, _, errs := runCLI(t, "", "process", "add", "--db", db, "--name", "Line 2 final", "--as", "qa"); code != exitOK {
		t.Fatalf("process add: %d %s", code, errs)
	}
	hosts := func(args ...string) (int, string, string) {
		return runCLI(t, "", append([]string{"alert", "hosts", "--db", db}, args...)...)
	}
	if code, out, _ := hosts(); code != exitOK || !strings.Contains(out, "any host") {
		t.Errorf("unset: %d %q", code, out)
	}
	for _, tc := range []struct {
		args []string
		want string
	}{
		{[]string{"--set", "chat.plant.example,http://x/", "--reason", "r"}, `--set "http://x/"`},
		{[]string{"--set", "chat.plant.example"}, `--reason ""`},
		{[]string{"--reason", "why"}, `--reason "why"`},
	} {
		code, out, errs := hosts(tc.args...)
		lines := strings.Split(strings.TrimRight(errs, "\n"), "\n")
		if code != exitUsage || out != "" || len(lines) != 1 || !strings.Contains(lines[0], tc.want) {
			t.Errorf("%v: exit %d, stdout %q, stderr %q; want 2 and one line naming %s", tc.args, code, out, errs, tc.want)
		}
	}
	if code, out, errs := hosts("--set", "chat.plant.example, 10.0.0.0/8", "--reason", "plant data stays on site", "--as", "admin"); code != exitOK || out != "chat.plant.example\n10.0.0.0/8\n" {
		t.Fatalf("set: %d %q %s", code, out, errs)
	}
	if _, out, _ := hosts(); out != "chat.plant.example\n10.0.0.0/8\n" {
		t.Errorf("print: %q", out)
	}
	code, out, errs := runCLI(t, "", "alert", "add", "--db", db, "--process", "Line 2 final", "--webhook", "https://hooks.outside.example/x", "--secret", "s")
	if code != exitUsage || out != "" || !strings.Contains(errs, `--webhook "https://hooks.outside.example/x"`) {
		t.Errorf("add to a host left out: %d %q %q", code, out, errs)
	}
	if code, _, errs := runCLI(t, "", "alert", "add", "--db", db, "--process", "Line 2 final", "--webhook", "http://10.9.8.7/hook", "--secret", "s"); code != exitOK {
		t.Errorf("add to an allowed host: %d %s", code, errs)
	}
	if code, out, _ := runCLI(t, "", "audit", "verify", "--db", db); code != exitOK {
		t.Errorf("audit verify: %d %s", code, out)
	}
}
