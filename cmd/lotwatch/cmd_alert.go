package main

import (
	"context"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"strconv"
	"strings"
	"text/tabwriter"
	"time"

	"lotwatch/store"
)

func init() {
	register(command{
		name:    "alert",
		summary: "add, list or remove the alert rules of processes (webhooks, e-mail)",
		run:     runAlert,
	})
}

const alertHelp = `Usage:
  lotwatch alert add --db FILE --process NAME --webhook URL --secret S [--on LIST] [--each-lot] [--unexplained-after DURATION] [--as NAME]
  lotwatch alert add --db FILE --process NAME --email ADDR [--on LIST] [--each-lot] [--unexplained-after DURATION] [--digest-at HH:MM] [--as NAME]
  lotwatch alert list --db FILE [--format text|json]
  lotwatch alert remove --db FILE --id N [--as NAME]
  lotwatch alert hosts --db FILE [--set LIST --reason TEXT] [--as NAME]

An alert rule sends a message when a lot of its process signals, while
"lotwatch serve" runs: to a webhook (a chat channel, a paging system; the
message is signed as the Standard Webhooks specification says, with the
secret) or to an e-mail address (serve --smtp-addr and --smtp-from).
"add" prints the new rule's id first. Lots posted, corrected or voided
alert one by one; an imported file, frozen limits and new settings of the
process (method, width, run rules, shift monitors) that judge stored lots
again send one message naming the lots that signal.

Options:
  --db FILE          the lotwatch database file, or a postgres:// URL
  --process NAME     the process whose lots are watched
  --webhook URL      an http or https URL; addresses on this host or the
                     plant's network are fine
  --secret S         the webhook's signing secret, as the receiver has it;
                     a secret starting whsec_ is base64 after the prefix
  --email ADDR       an e-mail address, instead of a webhook
  --on LIST          what raises an alert, a comma list of:
                       out_of_limits  a lot beyond a control limit
                       run_rule       a lot completing a run-rule
                                      signal (where it starts)
                       shift          a small-shift monitor (CUSUM,
                                      EWMA) signals at the lot
                       unexplained    a signalling lot with no recorded
                                      cause after --unexplained-after
                     (default out_of_limits,run_rule,shift)
  --each-lot         also alert on every lot that extends a run-rule or
                     shift signal already alerted (by default only the
                     lot where a signal starts alerts; unexplained
                     reminds of it)
  --unexplained-after DURATION
                     the delay of unexplained, e.g. 4h or 90m (default 4h)
  --digest-at HH:MM  e-mail only: send the messages once a day, as one
                     e-mail at this time of day in the process's time zone
                     (default: each message at once)
  --id N             the rule number shown by list
  --set LIST         hosts: the only hosts webhooks may go to, a comma list
                     of host names (chat.plant.example), *.domain, IP
                     addresses and ranges (10.0.0.0/8); "" allows any host
                     (the default). Without --set, hosts prints the list.
  --reason TEXT      why the hosts change (for the audit trail)
  --format F         text (the default) or json, for list
  --as NAME          the name recorded in the audit trail (default: your
                     user name on this computer)

Every change is recorded in the audit trail (the secret only as its
SHA-256). Exit status: 0 when done, 2 for bad input (one line naming the
option and value; nothing is stored), 1 when the database fails.
`

func runAlert(args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	return cliActions("alert", alertHelp, args, stdout, stderr,
		cliAction{"add", runAlertAdd},
		cliAction{"list", runAlertList},
		cliAction{"remove", runAlertRemove},
		cliAction{"hosts", runAlertHosts},
	)
}

// alertProblem is a rule's problem as one line naming the option.
func alertProblem(p store.Problem) string {
	return fmt.Sprintf("--%s %q: %s", p.Field, p.Value, p.Reason)
}

// cliExistingDB is the problem of a --db that is not an existing file
// (a command that only changes rules must not create a database).
func cliExistingDB(path string) []string {
	if path == "" {
		return nil
	}
	if cliNoFile(path) {
		return []string{fmt.Sprintf("--db %q: no such database file", path)}
	}
	return nil
}

func runAlertAdd(args []string, stdout, stderr io.Writer) int {
	const cmd = "alert add"
	fs := cliFlags(cmd)
	dbPath := fs.String("db", "", "")
	process := fs.String("process", "", "")
	webhook := fs.String("webhook", "", "")
	secret := fs.String("secret", "", "")
	email := fs.String("email", "", "")
	on := fs.String("on", "", "")
	after := fs.String("unexplained-after", "", "")
	eachLot := fs.Bool("each-lot", false, "")
	digest := fs.String("digest-at", "", "")
	as := fs.String("as", "", "")
	pos, code, done := cliParse(fs, args, alertHelp, stdout, stderr)
	if done {
		return code
	}
	// One line for the first problem: nothing is stored.
	fail := func(line string) int { return cliProblems(stderr, cmd, line) }
	if ps := append(cliRequire(cmd, "db", *dbPath, "process", *process), cliNoArgs(pos)...); len(ps) > 0 {
		return fail(ps[0])
	}
	set := map[string]bool{}
	fs.Visit(func(f *flag.Flag) { set[f.Name] = true })
	if set["webhook"] && *webhook == "" {
		return fail(`--webhook "": is empty: give an http or https URL`)
	}
	if set["secret"] && *secret == "" && *webhook != "" {
		return fail(`--secret "": is empty: a webhook needs a secret to sign its messages`)
	}
	triggers, ps := store.CheckTriggers(*on)
	if set["on"] && strings.TrimSpace(*on) == "" {
		ps = []store.Problem{{Field: "on", Value: *on, Reason: "is empty (want a comma list of " + strings.Join(store.Triggers, ", ") + ")"}}
	}
	if len(ps) > 0 {
		return fail(alertProblem(ps[0]))
	}
	r := store.AlertRule{Webhook: *webhook, Secret: *secret, Email: *email, On: triggers, EachLot: *eachLot, Digest: *digest}
	if *after != "" {
		d, err := time.ParseDuration(*after)
		if err != nil {
			return fail(fmt.Sprintf("--unexplained-after %q: is not a duration (e.g. 4h, 90m)", *after))
		}
		r.UnexplainedAfter = d
		if d == 0 {
			return fail(fmt.Sprintf("--unexplained-after %q: must be between 1m and 90 days", *after))
		}
	}
	if ps := store.CheckAlertRule(&r); len(ps) > 0 {
		return fail(alertProblem(ps[0]))
	}
	if ps := cliExistingDB(*dbPath); len(ps) > 0 {
		return fail(ps[0])
	}
	db, code, ok := cliOpen(stderr, cmd, *dbPath)
	if !ok {
		return code
	}
	defer db.Close()
	ctx := context.Background()
	p, err := db.ProcessByName(ctx, *process)
	if errors.Is(err, store.ErrNotFound) {
		return fail(fmt.Sprintf("--process %q: no such process (see lotwatch process list)", *process))
	}
	if err != nil {
		return cliStoreError(stderr, cmd, "", err)
	}
	if !p.Active {
		return fail(fmt.Sprintf("--process %q: the process is retired", *process))
	}
	r.ProcessID = p.ID
	nr, err := db.AddAlertRule(ctx, cliActor(*as), r)
	var ve *store.ValidationError
	if errors.As(err, &ve) && len(ve.Problems) > 0 {
		return fail(alertProblem(ve.Problems[0]))
	}
	if err != nil {
		return cliStoreError(stderr, cmd, "", err)
	}
	fmt.Fprintf(stdout, "%d alert rule for process %q: %s on %s\n", nr.ID, nr.Process, nr.Target(), strings.Join(nr.On, ","))
	return exitOK
}

// shortDuration writes 4h0m0s as 4h and 1h30m0s as 1h30m.
func shortDuration(d time.Duration) string {
	if d == 0 {
		return ""
	}
	s := d.String()
	if strings.HasSuffix(s, "m0s") {
		s = strings.TrimSuffix(s, "0s")
	}
	if strings.HasSuffix(s, "h0m") {
		s = strings.TrimSuffix(s, "0m")
	}
	return s
}

func runAlertList(args []string, stdout, stderr io.Writer) int {
	const cmd = "alert list"
	fs := cliFlags(cmd)
	dbPath := fs.String("db", "", "")
	format := fs.String("format", "text", "")
	pos, code, done := cliParse(fs, args, alertHelp, stdout, stderr)
	if done {
		return code
	}
	probs := append(cliRequire(cmd, "db", *dbPath), cliNoArgs(pos)...)
	if *format != "text" && *format != "json" {
		probs = append(probs, fmt.Sprintf("--format %q: want text or json", *format))
	}
	probs = append(probs, cliExistingDB(*dbPath)...)
	if len(probs) > 0 {
		return cliProblems(stderr, cmd, probs[0])
	}
	db, code, ok := cliOpen(stderr, cmd, *dbPath)
	if !ok {
		return code
	}
	defer db.Close()
	rules, err := db.AlertRules(context.Background())
	if err != nil {
		return cliStoreError(stderr, cmd, "", err)
	}
	if *format == "json" {
		type rj struct {
			ID               int64    `json:"id"`
			Process          string   `json:"process"`
			Target           string   `json:"target"`
			On               []string `json:"on"`
			UnexplainedAfter string   `json:"unexplained_after"`
			EachLot          bool     `json:"each_lot"`
			DigestAt         string   `json:"digest_at"`
		}
		out := []rj{}
		for _, r := range rules {
			out = append(out, rj{r.ID, r.Process, r.Target(), r.On, shortDuration(r.UnexplainedAfter), r.EachLot, r.Digest})
		}
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		enc.Encode(out)
		return exitOK
	}
	tw := tabwriter.NewWriter(stdout, 0, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "ID\tPROCESS\tTARGET\tON\tUNEXPLAINED AFTER\tEACH LOT\tDIGEST AT")
	for _, r := range rules {
		each := "no"
		if r.EachLot {
			each = "yes"
		}
		fmt.Fprintf(tw, "%d\t%s\t%s\t%s\t%s\t%s\t%s\n", r.ID, r.Process, r.Target(), strings.Join(r.On, ","), orNone(shortDuration(r.UnexplainedAfter)), each, orNone(r.Digest))
	}
	tw.Flush()
	return exitOK
}

func orNone(s string) string {
	if s == "" {
		return "-"
	}
	return s
}

func runAlertRemove(args []string, stdout, stderr io.Writer) int {
	const cmd = "alert remove"
	fs := cliFlags(cmd)
	dbPath := fs.String("db", "", "")
	idStr := fs.String("id", "", "")
	as := fs.String("as", "", "")
	pos, code, done := cliParse(fs, args, alertHelp, stdout, stderr)
	if done {
		return code
	}
	probs := append(cliRequire(cmd, "db", *dbPath, "id", *idStr), cliNoArgs(pos)...)
	id, err := strconv.ParseInt(*idStr, 10, 64)
	if *idStr != "" && (err != nil || id <= 0) {
		probs = append(probs, fmt.Sprintf("--id %q: want a rule number (see lotwatch alert list)", *idStr))
	}
	probs = append(probs, cliExistingDB(*dbPath)...)
	if len(probs) > 0 {
		return cliProblems(stderr, cmd, probs[0])
	}
	db, code, ok := cliOpen(stderr, cmd, *dbPath)
	if !ok {
		return code
	}
	defer db.Close()
	err = db.RemoveAlertRule(context.Background(), cliActor(*as), id)
	if errors.Is(err, store.ErrNotFound) {
		return cliProblems(stderr, cmd, fmt.Sprintf("--id %q: no alert rule in force has this number (see lotwatch alert list)", *idStr))
	}
	if err != nil {
		return cliStoreError(stderr, cmd, "", err)
	}
	fmt.Fprintf(stdout, "removed alert rule %d\n", id)
	return exitOK
}

// runAlertHosts prints or sets the plant's allow-list of webhook hosts.
// It is a command-line setting only: those who add rules on the Alerts
// page cannot widen it.
func runAlertHosts(args []string, stdout, stderr io.Writer) int {
	const cmd = "alert hosts"
	fs := cliFlags(cmd)
	dbPath := fs.String("db", "", "")
	list := fs.String("set", "", "")
	reason := fs.String("reason", "", "")
	as := fs.String("as", "", "")
	pos, code, done := cliParse(fs, args, alertHelp, stdout, stderr)
	if done {
		return code
	}
	set := map[string]bool{}
	fs.Visit(func(f *flag.Flag) { set[f.Name] = true })
	probs := append(cliRequire(cmd, "db", *dbPath), cliNoArgs(pos)...)
	if set["set"] {
		if _, ps := store.CheckWebhookHosts(*list); len(ps) > 0 {
			probs = append(probs, alertProblem(store.Problem{Field: "set", Value: ps[0].Value, Reason: ps[0].Reason}))
		}
		if strings.TrimSpace(*reason) == "" {
			probs = append(probs, `--reason "": say why webhooks may go to these hosts`)
		}
	} else if set["reason"] {
		probs = append(probs, fmt.Sprintf("--reason %q: is given without --set", *reason))
	}
	probs = append(probs, cliExistingDB(*dbPath)...)
	if len(probs) > 0 {
		return cliProblems(stderr, cmd, probs[0])
	}
	db, code, ok := cliOpen(stderr, cmd, *dbPath)
	if !ok {
		return code
	}
	defer db.Close()
	ctx := context.Background()
	hosts, err := db.WebhookHosts(ctx)
	if set["set"] {
		hosts, err = db.SetWebhookHosts(ctx, cliActor(*as), *reason, *list)
	}
	if err != nil {
		return cliStoreError(stderr, cmd, "", err)
	}
	if len(hosts) == 0 {
		fmt.Fprintln(stdout, "webhooks may go to any host (no allow-list is set)")
		return exitOK
	}
	for _, h := range hosts {
		fmt.Fprintln(stdout, h)
	}
	return exitOK
}
