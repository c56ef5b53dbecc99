package online

import (
	"encoding/json"
	"math"
	"strings"
	"testing"
)

// TestFloatsJSON: the array encoder writes what the element encoder writes,
// element by element (null for non-finite values), and reads back.
func TestFloatsJSON(t *testing.T) {
	cases := []struct {
		name string
		v    Floats
	}{
		{"nil", nil},
		{"empty", Floats{}},
		{"finite", Floats{0, 1, -2.5, 1e-7, 3.14159e21, math.SmallestNonzeroFloat64, math.MaxFloat64}},
		{"non-finite", Floats{Float(math.NaN()), Float(math.Inf(1)), Float(math.Inf(-1)), 2}},
	}
	for _, c := range cases {
		got, err := json.Marshal(struct{ A Floats }{c.v})
		if err != nil {
			t.Fatalf("%s: %v", c.name, err)
		}
		want := `{"A":null}`
		if c.v != nil {
			parts := make([]string, len(c.v))
			for i, f := range c.v {
				b, err := json.Marshal(f)
				if err != nil {
					t.Fatal(err)
				}
				parts[i] = string(b)
			}
			want = `{"A":[` + strings.Join(parts, ",") + `]}`
		}
		if string(got) != want {
			t.Errorf("%s: %s, want %s", c.name, got, want)
		}
		var back struct{ A Floats }
		if err := json.Unmarshal(got, &back); err != nil {
			t.Fatalf("%s: reading back: %v", c.name, err)
		}
		if len(back.A) != len(c.v) || (back.A == nil) != (c.v == nil) {
			t.Fatalf("%s: read back %v, want %v", c.name, back.A, c.v)
		}
		for i, f := range back.A {
			x, y := float64(f), float64(c.v[i])
			if !(x == y || math.IsNaN(x) && (math.IsNaN(y) || math.IsInf(y, 0))) {
				t.Errorf("%s: element %d read back as %v, want %v", c.name, i, x, y)
			}
		}
	}
}
