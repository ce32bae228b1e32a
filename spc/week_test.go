package spc

import (
	"testing"
	"time"
	_ "time/tzdata" // zone data for the daylight-saving checks on any machine
)

func mustZone(t *testing.T, name string) *time.Location {
	t.Helper()
	loc, err := time.LoadLocation(name)
	if err != nil {
		t.Fatal(err)
	}
	return loc
}

// TestISOWeekYearBoundaries checks weeks around New Year. Source of the
// expected values: ISO 8601 (week 1 holds the first Thursday) and were checked
// against Go's time.Time.ISOWeek, a general-purpose implementation.
func TestISOWeekYearBoundaries(t *testing.T) {
	tests := []struct {
		date       string
		year, week int
	}{
		{"2021-01-03", 2020, 53}, // 2020 began on a Wednesday in a leap year
		{"2021-01-04", 2021, 1},
		{"2024-12-30", 2025, 1},
		{"2025-12-28", 2025, 52},
		{"2025-12-29", 2026, 1},
		{"2026-12-31", 2026, 53}, // 2026 begins on a Thursday
		{"2027-01-03", 2026, 53},
		{"2027-01-04", 2027, 1},
		{"2008-12-29", 2009, 1},
		{"2010-01-03", 2009, 53},
	}
	for _, tt := range tests {
		d, err := time.Parse("2006-01-02", tt.date)
		if err != nil {
			t.Fatal(err)
		}
		d = d.Add(12 * time.Hour)
		y, w := ISOWeekOf(d, time.UTC)
		gy, gw := d.ISOWeek()
		if y != tt.year || w != tt.week || y != gy || w != gw {
			t.Errorf("%s: %s, want %s (Go %s)", tt.date, FormatISOWeek(y, w), FormatISOWeek(tt.year, tt.week), FormatISOWeek(gy, gw))
		}
		from, to := ISOWeekRange(tt.year, tt.week, time.UTC)
		if d.Before(from) || !d.Before(to) || from.Weekday() != time.Monday {
			t.Errorf("%s not in %s range [%v, %v)", tt.date, FormatISOWeek(tt.year, tt.week), from, to)
		}
	}
	for year, want := range map[int]int{2015: 53, 2019: 52, 2020: 53, 2021: 52, 2024: 52, 2025: 52, 2026: 53, 2032: 53} {
		if got := ISOWeeksInYear(year); got != want {
			t.Errorf("ISOWeeksInYear(%d) = %d, want %d", year, got, want)
		}
	}
}

// TestISOWeekRangeAgainstGo (reference: the standard library's
// time.ISOWeek) walks every day of 1999–2041 and checks that
// the week Go's time.ISOWeek gives for it has a range holding the day,
// starting on a Monday at midnight, seven calendar days long, and that
// consecutive weeks join without gaps.
func TestISOWeekRangeAgainstGo(t *testing.T) {
	berlin := mustZone(t, "Europe/Berlin")
	for _, loc := range []*time.Location{time.UTC, berlin} {
		var prevTo time.Time
		prevY, prevW := 0, 0
		for d := time.Date(1999, 1, 1, 12, 0, 0, 0, loc); d.Year() < 2042; d = d.AddDate(0, 0, 1) {
			y, w := d.ISOWeek()
			if y == prevY && w == prevW {
				continue
			}
			from, to := ISOWeekRange(y, w, loc)
			if d.Before(from) || !d.Before(to) {
				t.Fatalf("%v: %s range [%v, %v)", d, FormatISOWeek(y, w), from, to)
			}
			if from.Weekday() != time.Monday || from.Hour() != 0 || to.Sub(from) < 167*time.Hour || to.Sub(from) > 169*time.Hour {
				t.Fatalf("%s in %v: range [%v, %v)", FormatISOWeek(y, w), loc, from, to)
			}
			if prevY != 0 {
				if !prevTo.Equal(from) {
					t.Fatalf("%s does not start where the week before ended", FormatISOWeek(y, w))
				}
				if py, pw := PreviousISOWeek(y, w); py != prevY || pw != prevW {
					t.Fatalf("PreviousISOWeek(%s) = %s, want %s", FormatISOWeek(y, w), FormatISOWeek(py, pw), FormatISOWeek(prevY, prevW))
				}
				if ny, nw := NextISOWeek(prevY, prevW); ny != y || nw != w {
					t.Fatalf("NextISOWeek(%s) = %s", FormatISOWeek(prevY, prevW), FormatISOWeek(ny, nw))
				}
			}
			prevY, prevW, prevTo = y, w, to
		}
	}
}

func TestISOWeekTimeZone(t *testing.T) {
	tokyo := mustZone(t, "Asia/Tokyo")
	// Sunday 29 November 2026, 20:00 UTC is Monday 30 November, 05:00 in
	// Tokyo (UTC+9, no daylight saving).
	sun := time.Date(2026, time.November, 29, 20, 0, 0, 0, time.UTC)
	if sun.Weekday() != time.Sunday {
		t.Fatalf("%v is not a Sunday", sun)
	}
	if y, w := ISOWeekOf(sun, time.UTC); FormatISOWeek(y, w) != "2026-W48" {
		t.Errorf("UTC: %s, want 2026-W48", FormatISOWeek(y, w))
	}
	if y, w := ISOWeekOf(sun, tokyo); FormatISOWeek(y, w) != "2026-W49" {
		t.Errorf("Tokyo: %s, want 2026-W49", FormatISOWeek(y, w))
	}
	from, _ := ISOWeekRange(2026, 49, tokyo)
	if want := time.Date(2026, time.November, 29, 15, 0, 0, 0, time.UTC); !from.Equal(want) {
		t.Errorf("2026-W49 in Tokyo starts %v, want %v", from.UTC(), want)
	}
	if y, w := ISOWeekOf(sun, nil); y != 2026 || w != 48 {
		t.Error("nil location is not UTC")
	}
}

// TestISOWeekDaylightSaving checks week lengths across the 2026 changes:
// EU rules switch on the last Sundays of March and October (Directive
// 2000/84/EC); US rules on the second Sunday of March and the first of
// November (Energy Policy Act of 2005).
func TestISOWeekDaylightSaving(t *testing.T) {
	berlin, chicago := mustZone(t, "Europe/Berlin"), mustZone(t, "America/Chicago")
	tests := []struct {
		loc        *time.Location
		year, week int
		hours      float64
	}{
		{berlin, 2026, 13, 167}, // 29 March 2026
		{berlin, 2026, 43, 169}, // 25 October 2026
		{berlin, 2026, 20, 168},
		{chicago, 2026, 10, 167}, // 8 March 2026
		{chicago, 2026, 44, 169}, // 1 November 2026
		{chicago, 2026, 53, 168},
	}
	for _, tt := range tests {
		from, to := ISOWeekRange(tt.year, tt.week, tt.loc)
		if got := to.Sub(from).Hours(); got != tt.hours {
			t.Errorf("%s in %v: %v hours, want %v", FormatISOWeek(tt.year, tt.week), tt.loc, got, tt.hours)
		}
		if from.Hour() != 0 || to.Hour() != 0 || from.Weekday() != time.Monday || to.Weekday() != time.Monday {
			t.Errorf("%s in %v: [%v, %v) not Monday midnight to Monday midnight", FormatISOWeek(tt.year, tt.week), tt.loc, from, to)
		}
	}
}

func TestParseISOWeek(t *testing.T) {
	good := []struct {
		s          string
		year, week int
	}{
		{"2026-W48", 2026, 48}, {"2026W48", 2026, 48}, {"2020-W53", 2020, 53},
		{"2026-W53", 2026, 53}, {"2026-W01", 2026, 1},
	}
	for _, tt := range good {
		y, w, err := ParseISOWeek(tt.s)
		if err != nil || y != tt.year || w != tt.week {
			t.Errorf("ParseISOWeek(%q) = %d, %d, %v", tt.s, y, w, err)
		}
		if tt.s[4] == '-' && FormatISOWeek(y, w) != tt.s {
			t.Errorf("FormatISOWeek(%d, %d) = %q", y, w, FormatISOWeek(y, w))
		}
	}
	for _, s := range []string{"", "2025-W53", "2026-W00", "2026-W54", "2026-w48", "2026-W4", "26-W48", "2026-48", "2026-W4a", " 2026-W48"} {
		if _, _, err := ParseISOWeek(s); err == nil {
			t.Errorf("ParseISOWeek(%q): no error", s)
		}
	}
	if y, w := PreviousISOWeek(2021, 1); y != 2020 || w != 53 {
		t.Errorf("PreviousISOWeek(2021, 1) = %d, %d", y, w)
	}
	if y, w := PreviousISOWeek(2026, 1); y != 2025 || w != 52 {
		t.Errorf("PreviousISOWeek(2026, 1) = %d, %d", y, w)
	}
}
