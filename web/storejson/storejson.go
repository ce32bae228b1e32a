// Package storejson is the JSON of what the store holds — a process, an
// annotation — one type each, shared by the API, the command line and the
// weekly review's JSON, so that a field has one name and one meaning
// wherever it is read. It renders only; it reads and serves nothing.
package storejson

import (
	"time"

	"lotwatch/spc/chartjson"
	"lotwatch/store"
)

// Process is a process: the fields the API's description (openapi.json)
// fixes, then those the command line also shows. Limits, Sigma and TZ
// repeat Method, K and TimeZone under the names `lotwatch process list`
// has always written, which scripts read.
type Process struct {
	ID          int64         `json:"id"`
	Name        string        `json:"name"`
	Description string        `json:"description"`
	Chart       string        `json:"chart"`
	Method      string        `json:"method"`
	K           chartjson.Num `json:"k"`
	Rules       string        `json:"rules"`
	Categories  []string      `json:"categories"`
	TimeZone    string        `json:"time_zone"`
	Active      bool          `json:"active"`
	Created     string        `json:"created"`

	Area      string            `json:"area"`
	Limits    string            `json:"limits"`
	Sigma     chartjson.Num     `json:"sigma"`
	TZ        string            `json:"tz"`
	ColumnMap map[string]string `json:"map,omitempty"`
	DateOrder string            `json:"date_order,omitempty"`
}

// ProcessOf is p as JSON; its categories are [] rather than null.
func ProcessOf(p store.Process) Process {
	cats := p.Categories
	if cats == nil {
		cats = []string{}
	}
	return Process{ID: p.ID, Name: p.Name, Description: p.Description, Chart: string(p.Chart),
		Method: string(p.Method), K: chartjson.Num(p.K), Rules: p.Rules, Categories: cats, TimeZone: p.TimeZone,
		Active: p.Active, Created: p.Created.UTC().Format(time.RFC3339),
		Area: p.Area, Limits: string(p.Method), Sigma: chartjson.Num(p.K), TZ: p.TimeZone,
		ColumnMap: p.ColumnMap, DateOrder: p.DateOrder}
}

// Annotation is an assignable cause recorded on a lot (for one of its
// signals when Rule is set), or the finding that none was found
// (NoCauseFound, with its Reason).
type Annotation struct {
	ID           int64  `json:"id"`
	ProcessID    int64  `json:"process_id"`
	LotID        int64  `json:"lot_id"`
	Lot          string `json:"lot"`
	Rule         string `json:"rule"`
	Cause        string `json:"cause"`
	Action       string `json:"action"`
	NoCauseFound bool   `json:"no_cause_found"`
	Reason       string `json:"reason"`
	Closed       bool   `json:"closed"`
	By           string `json:"by"`
	At           string `json:"at"`
	ClosedBy     string `json:"closed_by,omitempty"`
	ClosedAt     string `json:"closed_at,omitempty"`
}

// AnnotationOf is a as JSON, lot the code of its lot, with times in loc.
func AnnotationOf(a store.Annotation, lot string, loc *time.Location) Annotation {
	out := Annotation{ID: a.ID, ProcessID: a.ProcessID, LotID: a.LotID, Lot: lot, Rule: a.Rule, Cause: a.Cause,
		Action: a.Action, NoCauseFound: a.NoCauseFound, Reason: a.Reason, Closed: a.Closed, By: a.By,
		At: a.At.In(loc).Format(time.RFC3339), ClosedBy: a.ClosedBy}
	if !a.ClosedAt.IsZero() {
		out.ClosedAt = a.ClosedAt.In(loc).Format(time.RFC3339)
	}
	return out
}

// User is a user as the API and `lotwatch user list` show one.
type User struct {
	ID      int64  `json:"id"`
	Name    string `json:"name"`
	Role    string `json:"role"`
	Active  bool   `json:"active"`
	Created string `json:"created"`
}

// UserOf is u as JSON.
func UserOf(u store.User) User {
	return User{ID: u.ID, Name: u.Name, Role: string(u.Role), Active: u.Active, Created: u.Created.UTC().Format(time.RFC3339)}
}
