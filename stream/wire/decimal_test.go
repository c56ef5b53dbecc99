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
		{"123456789012345", true}, {"1234567890123456", true}, {"0.1234567890123456", true},
		// 16 and 17 digits past 2⁵³: corrected by exact comparisons.
		{"1052.5600491369987", true}, {"-1052.5600491369987", true}, {"9007199254740993", false}, // 2⁵³+1 ≥ 2⁵³: strconv
		{"900719925474099.3", true}, {"0.0012765484253542056", true}, {"0.00069499315752312091", false}, // 20 fraction digits
		{"1234567890123456789", false}, {"123456789.0123456789", true}, {"123456789.01234567891", false}, {"1234567890.123456789", true}, // 19 digits, x < 2⁵³
		{"1e3", false}, {"2.5E-7", false}, {"-1.5e+2", false},
		// 20 significant digits, the last eight read at once: m would pass 2⁶⁴.
		{"999999999999.99999999", false}, {"123456789012.12345678", false}, {"0.12345678901234567890", false},
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
	// Random plain decimals of 1 to 19 digits, the point anywhere.
	r := rand.New(rand.NewPCG(3, 4))
	for range 400000 {
		nd := 1 + r.IntN(19)
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
		checkExactDecimal(t, s)
	}
}

// checkExactDecimal compares exactDecimal with strconv.ParseFloat, bit for
// bit, when it takes s, and reports whether it did.
func checkExactDecimal(t *testing.T, s string) bool {
	t.Helper()
	got, ok := exactDecimal([]byte(s))
	want, err := strconv.ParseFloat(s, 64)
	if err != nil {
		t.Fatal(err)
	}
	if ok && math.Float64bits(got) != math.Float64bits(want) {
		t.Fatalf("%s: %v (%x), want %v (%x)", s, got, math.Float64bits(got), want, math.Float64bits(want))
	}
	return ok
}

// TestExactDecimalLongTimes: times as a recorder writes them, the shortest
// decimal that reads back as the float64 (strconv.FormatFloat(v, 'f', -1,
// 64), mostly 16 or 17 digits), from a millisecond to a day and beyond,
// read bit for bit as strconv.ParseFloat reads them (the reference:
// correctly rounded conversion); and the same values written with 17 and
// 19 significant digits, which are not the value itself but read to the
// nearest double all the same. Most must take the fast path.
func TestExactDecimalLongTimes(t *testing.T) {
	r := rand.New(rand.NewPCG(5, 6))
	fast, n := 0, 0
	for range 300000 {
		v := math.Exp(r.Float64()*math.Log(1e7/1e-3)) * 1e-3 // log-uniform, 1 ms to 10⁷ s
		for _, s := range []string{
			strconv.FormatFloat(v, 'f', -1, 64),
			strconv.FormatFloat(v, 'f', max(0, 16-int(math.Floor(math.Log10(v)))), 64), // 17 significant digits
			strconv.FormatFloat(v, 'f', max(0, 18-int(math.Floor(math.Log10(v)))), 64), // 19
		} {
			n++
			if checkExactDecimal(t, s) {
				fast++
			}
		}
	}
	if fast < n*9/10 {
		t.Errorf("fast path took %d of %d times, want at least 90%%", fast, n)
	}
}

// TestExactDecimalTies: decimals that lie exactly half way between two
// neighbouring doubles, (2K+1)·2^E for E = −1…−4 (and their neighbours a
// last digit away), must round to the even significand as
// strconv.ParseFloat does (IEEE 754 round half to even).
func TestExactDecimalTies(t *testing.T) {
	r := rand.New(rand.NewPCG(7, 8))
	fast := 0
	for range 100000 {
		k := uint64(1)<<52 | r.Uint64()&(1<<52-1)
		e := 1 + r.IntN(4)
		// (2k+1)/2^e = (2k+1)·5^e / 10^e: an integer of digits, e of them
		// fraction digits.
		m := (2*k + 1)
		for range e {
			m *= 5
		}
		for _, d := range []uint64{m, m - 1, m + 1} {
			digits := strconv.FormatUint(d, 10)
			s := digits[:len(digits)-e] + "." + digits[len(digits)-e:]
			if checkExactDecimal(t, s) && d == m {
				fast++
			}
		}
	}
	if fast == 0 {
		t.Error("no tie took the fast path")
	}
}

// TestEightDigits checks the eight-digit step against strconv.ParseUint
// (the reference) on random digit strings, and its digit test on strings
// with one byte just outside '0'…'9' at each place.
func TestEightDigits(t *testing.T) {
	r := rand.New(rand.NewPCG(7, 8))
	word := func(s string) uint64 {
		var w uint64
		for i := range 8 {
			w |= uint64(s[i]) << (8 * i)
		}
		return w
	}
	for range 100000 {
		b := make([]byte, 8)
		for i := range b {
			b[i] = byte('0' + r.IntN(10))
		}
		want, err := strconv.ParseUint(string(b), 10, 64)
		if err != nil {
			t.Fatal(err)
		}
		w := word(string(b))
		if !eightDigits(w) || eightDigitsValue(w) != want {
			t.Fatalf("%s: digits %v, value %d, want %d", b, eightDigits(w), eightDigitsValue(w), want)
		}
	}
	for i := range 8 {
		for _, c := range []byte{'/', ':', 'e', '.', '-', 0xff, 0x00} {
			b := []byte("12345678")
			b[i] = c
			if eightDigits(word(string(b))) {
				t.Errorf("%q taken for eight digits", b)
			}
		}
	}
}
