package chartjson

import (
	"encoding/json"
	"math"
	"testing"
)

// TestNum checks that an undefined figure is written as JSON null and
// every other as the shortest number that reads back the same (the
// exact contract of the API and `lotwatch analyze`: numbers or null).
// Source: RFC 8259 §6, a JSON number has no NaN or infinity; the
// shortest form that reads back is strconv's 'g' with precision -1.
func TestNum(t *testing.T) {
	for _, tc := range []struct {
		in   float64
		want string
	}{
		{0.015, "0.015"}, {3, "3"}, {-0, "0"}, {1e-300, "1e-300"},
		{math.NaN(), "null"}, {math.Inf(1), "null"}, {math.Inf(-1), "null"},
	} {
		got, err := json.Marshal(Num(tc.in))
		if err != nil || string(got) != tc.want {
			t.Errorf("Num(%v) = %s, %v; want %s", tc.in, got, err, tc.want)
		}
	}
}
