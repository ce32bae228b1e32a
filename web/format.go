package web

import (
	"fmt"
	"math"
	"strconv"
	"strings"
	"time"
)

// fmtFloat shows a number with four significant digits, or "—" where it
// is not defined.
func fmtFloat(f float64) string {
	if math.IsNaN(f) || math.IsInf(f, 0) {
		return "—"
	}
	return strconv.FormatFloat(f, 'g', 4, 64)
}

// fmtWhen shows a time as the plant reads it: date and minute in the
// time's own zone, with the zone named so that a reader on another clock
// is not misled.
func fmtWhen(t time.Time) string {
	if t.IsZero() {
		return "—"
	}
	return t.Format("2006-01-02 15:04 MST")
}

// plural is "1 lot", "2 lots".
func plural(n int, one, many string) string {
	if n == 1 {
		return "1 " + one
	}
	return thousands(int64(n)) + " " + many
}

// thousands writes n with a comma between groups of three digits
// ("4,100").
func thousands(n int64) string {
	s := strconv.FormatInt(n, 10)
	neg := strings.HasPrefix(s, "-")
	s = strings.TrimPrefix(s, "-")
	var b strings.Builder
	if neg {
		b.WriteByte('-')
	}
	for i, r := range s {
		if i > 0 && (len(s)-i)%3 == 0 {
			b.WriteByte(',')
		}
		b.WriteRune(r)
	}
	return b.String()
}

// tailWords says a lot's tail probability in plain words: how rare a count
// this far from the centre is when the process runs at the centre rate.
// unit is "lots" or "subgroups".
func tailWords(p float64, above bool, unit string) string {
	if math.IsNaN(p) || p < 0 {
		return ""
	}
	dir := "this high or higher"
	if !above {
		dir = "this low or lower"
	}
	if p >= 0.2 {
		return fmt.Sprintf("a count %s is common at the centre rate (%.0f %% of %s)", dir, 100*p, unit)
	}
	if p <= 0 {
		return fmt.Sprintf("a count %s is practically impossible at the centre rate", dir)
	}
	n := 1 / p
	var ns string
	switch {
	case n < 100:
		ns = strconv.FormatInt(int64(math.Round(n)), 10)
	case n < 1e9:
		// two significant digits are all the estimate carries
		mag := math.Pow(10, math.Floor(math.Log10(n))-1)
		ns = thousands(int64(math.Round(n/mag) * mag))
	default:
		ns = "more than 1,000,000,000"
	}
	return fmt.Sprintf("a count %s happens in 1 of %s %s at the centre rate", dir, ns, unit)
}
