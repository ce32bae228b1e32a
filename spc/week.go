package spc

import (
	"fmt"
	"strconv"
	"time"
)

// ISO 8601 weeks start on Monday; week 1 of a year is the week that holds
// its first Thursday (equivalently 4 January), so a year has 52 or 53
// weeks and the first days of January may belong to the previous year's
// last week.

// ISOWeekOf returns the ISO 8601 year and week of t as seen on the clocks
// of loc (nil means UTC): a Sunday evening in UTC may already be Monday, and
// so the next week, in Tokyo.
func ISOWeekOf(t time.Time, loc *time.Location) (year, week int) {
	if loc == nil {
		loc = time.UTC
	}
	return t.In(loc).ISOWeek()
}

// ISOWeeksInYear returns the number of ISO weeks of year, 52 or 53. A year
// has 53 weeks when 28 December (always in its last week) falls in week 53.
func ISOWeeksInYear(year int) int {
	_, w := time.Date(year, time.December, 28, 12, 0, 0, 0, time.UTC).ISOWeek()
	return w
}

// ParseISOWeek parses an ISO 8601 week such as "2026-W48" (extended form)
// or "2026W48" (basic form). The week must exist in that year.
func ParseISOWeek(s string) (year, week int, err error) {
	bad := func(why string) (int, int, error) {
		return 0, 0, fmt.Errorf("week %q %s", s, why)
	}
	var ys, ws string
	switch {
	case len(s) == 8 && s[4] == '-' && s[5] == 'W':
		ys, ws = s[:4], s[6:]
	case len(s) == 7 && s[4] == 'W':
		ys, ws = s[:4], s[5:]
	default:
		return bad("is not an ISO week: want YYYY-Www, e.g. 2026-W48")
	}
	if !allDigits(ys) || !allDigits(ws) {
		return bad("is not an ISO week: want YYYY-Www, e.g. 2026-W48")
	}
	year, _ = strconv.Atoi(ys)
	week, _ = strconv.Atoi(ws)
	if n := ISOWeeksInYear(year); week < 1 || week > n {
		return bad(fmt.Sprintf("does not exist: %d has weeks 01 to %02d", year, n))
	}
	return year, week, nil
}

func allDigits(s string) bool {
	for i := 0; i < len(s); i++ {
		if s[i] < '0' || s[i] > '9' {
			return false
		}
	}
	return s != ""
}

// FormatISOWeek formats a week in the ISO 8601 extended form, "2026-W48".
func FormatISOWeek(year, week int) string {
	return fmt.Sprintf("%04d-W%02d", year, week)
}

// ISOWeekRange returns the half-open interval [from, to) of the ISO week:
// Monday 00:00 on the clocks of loc (nil means UTC) to the next Monday
// 00:00. The dates are built with time.Date in loc, so a week holding a
// daylight-saving change lasts 167 or 169 hours rather than 168. Where a
// zone skips local midnight itself, time.Date's normalization moves the
// bound to the first instant of that day.
func ISOWeekRange(year, week int, loc *time.Location) (from, to time.Time) {
	if loc == nil {
		loc = time.UTC
	}
	// Monday of week 1 is the Monday on or before 4 January.
	jan4 := time.Date(year, time.January, 4, 12, 0, 0, 0, time.UTC)
	back := (int(jan4.Weekday()) + 6) % 7 // days since Monday
	day := 4 - back + (week-1)*7
	from = time.Date(year, time.January, day, 0, 0, 0, 0, loc)
	to = time.Date(year, time.January, day+7, 0, 0, 0, 0, loc)
	return from, to
}

// PreviousISOWeek returns the week before the given one, crossing into the
// last week (52 or 53) of the previous year from week 1.
func PreviousISOWeek(year, week int) (int, int) {
	if week > 1 {
		return year, week - 1
	}
	return year - 1, ISOWeeksInYear(year - 1)
}

// NextISOWeek returns the week after the given one.
func NextISOWeek(year, week int) (int, int) {
	if week < ISOWeeksInYear(year) {
		return year, week + 1
	}
	return year + 1, 1
}
