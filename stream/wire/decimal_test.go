package wire

import (
	"math"
	"math/rand/v2"
	"strconv"
	"testing"
)

// TestExactDecimal: the fast path reads plain decimals exactly as Go's
// strconv.ParseFloat (the reference: correctly rounded conversion), bit for
// bit, and leaves everything else to it.
func TestExactDecimal(t *testing.T) {
	cases := []struct {
		in   string
		fast bool
	}{
		{"0", true}, {"-0", true}, {"0.1", true}, {"12.345678", true}, {"-3.25", true},
		{"1800.016666", true}, {"0.000000000000001", true}, {"0.0000000000000000000001", true}, {"0.00000000000000000000001", false}, {"999999999999999", true},
		{"123456789012345", true}, {"1234567890123456", false}, {"0.1234567890123456", false},
		{"1e3", false}, {"2.5E-7", false}, {"-1.5e+2", false},
	}
	for _, c := range cases {
		got, ok := exactDecimal([]byte(c.in))
		if ok != c.fast {
			t.Errorf("%s: fast path %v, want %v", c.in, ok, c.fast)
		}
		if !ok {
			continue
		}
		want, err := strconv.ParseFloat(c.in, 64)
		if err != nil {
			t.Fatal(err)
		}
		if math.Float64bits(got) != math.Float64bits(want) {
			t.Errorf("%s: %v, want %v", c.in, got, want)
		}
	}
	// Random plain decimals of 1 to 15 digits, the point anywhere.
	r := rand.New(rand.NewPCG(3, 4))
	for range 200000 {
		nd := 1 + r.IntN(15)
		digits := make([]byte, nd)
		for i := range digits {
			digits[i] = byte('0' + r.IntN(10))
		}
		p := r.IntN(nd + 1)
		s := string(digits[:p])
		if p == 0 {
			s = "0"
		}
		if p < nd {
			s += "." + string(digits[p:])
		}
		if r.IntN(2) == 0 {
			s = "-" + s
		}
		got, ok := exactDecimal([]byte(s))
		want, err := strconv.ParseFloat(s, 64)
		if err != nil {
			t.Fatal(err)
		}
		if ok && math.Float64bits(got) != math.Float64bits(want) {
			t.Fatalf("%s: %v (%x), want %v (%x)", s, got, math.Float64bits(got), want, math.Float64bits(want))
		}
	}
}
