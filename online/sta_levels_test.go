package online

import (
	"fmt"
	"math"
	"math/big"
	"math/rand/v2"
	"testing"
)

// staRouteStream is a stream of bins for comparing the routes of the STA
// fold: two-level frames after a grey start, a bin whose lagged row is not
// the shift of the one before (a restarted history), one frame with a third
// level, halves alternating every 37 bins, counts of 1–5, a unit with
// counts of 20–40, a unit with counts of 200–255 in every bin (its integer
// sums pass 2¹⁶ − 1 several times), one count of 300 (beyond the integer
// route), a unit whose
// counts come split in two entries per bin, and optionally non-integer
// counts.
type staRouteStream struct {
	pixels, lags, units int
	x                   [][]float64 // lagged rows, one per bin
	halfA               []bool
	counts              [][]Count
}

func newSTARouteStream(lo, hi float64, fractional bool) *staRouteStream {
	const pixels, lags, units, frames = 20, 4, 7, 2000
	rng := rand.New(rand.NewPCG(31, uint64(math.Float64bits(lo))))
	f := make([][]float64, frames)
	for m := range f {
		f[m] = make([]float64, pixels)
		for p := range f[m] {
			switch {
			case m < 40: // grey: one level, 0, before the noise
			case rng.IntN(2) == 0:
				f[m][p] = lo
			default:
				f[m][p] = hi
			}
		}
	}
	f[450][3] = 0.5 // a third level (sums stay exact in float64): the batches holding frame 450 go by multiply-adds
	st := &staRouteStream{pixels: pixels, lags: lags, units: units}
	for k := lags - 1; k < frames; k++ {
		x := make([]float64, pixels*lags)
		staLagged(x, f, k, lags)
		if k == 300 { // a lagged row from elsewhere: the lag shift breaks twice
			for i := range x {
				x[i] = [2]float64{lo, hi}[rng.IntN(2)]
			}
		}
		st.x = append(st.x, x)
		st.halfA = append(st.halfA, (k/37)%2 == 0)
		var c []Count
		for u := range units {
			if rng.Float64() > 0.3 && u != 6 {
				continue
			}
			n := 1.0
			switch {
			case u == 6: // in every bin: its sums pass 2¹⁶ and are drained on the way
				n = float64(200 + rng.IntN(56))
			case u == 5:
				n = float64(20 + rng.IntN(21))
			case rng.Float64() < 0.25:
				n = float64(2 + rng.IntN(4))
			}
			if fractional && rng.Float64() < 0.2 {
				n += [3]float64{0.5, 0.25, 1.0 / 3}[rng.IntN(3)]
			}
			if u == 2 && n > 1 {
				c = append(c, Count{Unit: u, N: 1}, Count{Unit: u, N: n - 1})
				continue
			}
			c = append(c, Count{Unit: u, N: n})
		}
		if k == 600 {
			c = append(c, Count{Unit: 4, N: 300})
		}
		st.counts = append(st.counts, c)
	}
	return st
}

// feed adds the stream's bins to s, reading unit 0 before bin readAt (a
// drain of the two-level route's integer sums mid-stream).
func (st *staRouteStream) feed(s *STA, readAt int) {
	for k, x := range st.x {
		if k == readAt {
			s.CrossTo(make([]float64, s.Dim()), 0)
		}
		s.AddBin(x, st.halfA[k], st.counts[k])
	}
	s.Flush()
}

// exact returns, per unit and half, Σ_k c_k·x_k computed exactly in
// math/big (a sum of float64 products in 300-bit floats, exact at these
// sizes), its magnitude Σ_k |c_k·x_k| and the number of count entries.
func (st *staRouteStream) exact() (sum, size [][2][]float64, entries [][2]int) {
	D := st.pixels * st.lags
	acc := make([][2][]*big.Float, st.units)
	sum = make([][2][]float64, st.units)
	size = make([][2][]float64, st.units)
	entries = make([][2]int, st.units)
	for u := range acc {
		for h := range 2 {
			acc[u][h] = make([]*big.Float, D)
			for i := range acc[u][h] {
				acc[u][h][i] = new(big.Float).SetPrec(300)
			}
			sum[u][h], size[u][h] = make([]float64, D), make([]float64, D)
		}
	}
	prod := new(big.Float).SetPrec(300)
	for k, x := range st.x {
		h := 1
		if st.halfA[k] {
			h = 0
		}
		for _, c := range st.counts[k] {
			entries[c.Unit][h]++
			for i, v := range x {
				prod.SetFloat64(c.N).Mul(prod, new(big.Float).SetFloat64(v))
				acc[c.Unit][h][i].Add(acc[c.Unit][h][i], prod)
				size[c.Unit][h][i] += math.Abs(c.N * v)
			}
		}
	}
	for u := range acc {
		for h := range 2 {
			for i, a := range acc[u][h] {
				sum[u][h][i], _ = a.Float64()
			}
		}
	}
	return sum, size, entries
}

// TestSTALevelsRoute feeds the same bins through the two-level route (every
// spike by integer counts; a unit's half with spikes in fewer than 5 bins of a
// batch by multiply-adds; the default choice) and through the float route,
// and compares the cross sums with each other and with their exact values. For ±1 and 0/1 levels and integer counts every sum is
// an integer below 2⁵³ and both routes must give it exactly, bit for bit.
// For other levels (−0.3/0.7) or non-integer counts the routes round
// differently; each must lie within (n + 16)·u·Σ|c_k·x_k| of the exact sum,
// u = 2⁻⁵³, n the number of count entries: the bound of recursive summation
// (Higham, Accuracy and Stability of Numerical Algorithms, 2nd ed., §4.2,
// |E| ≤ (n−1)·u·Σ|x_i| + O(u²)), with 16 spare roundings for the two-level route's
// drains (three roundings and an addition each, at most four drains here).
func TestSTALevelsRoute(t *testing.T) {
	for _, tc := range []struct {
		name       string
		lo, hi     float64
		fractional bool
		exact      bool
	}{
		{"±1, integer counts", -1, 1, false, true},
		{"0/1, integer counts", 0, 1, false, true},
		{"−0.3/0.7, integer counts", -0.3, 0.7, false, false},
		{"±1, some non-integer counts", -1, 1, true, false},
		{"0/1, some non-integer counts", 0, 1, true, false},
		{"−0.3/0.7, some non-integer counts", -0.3, 0.7, true, false},
	} {
		st := newSTARouteStream(tc.lo, tc.hi, tc.fractional)
		want, size, entries := st.exact()
		for _, batch := range []int{staBatchBins, 100} {
			t.Run(fmt.Sprintf("%s/batch %d", tc.name, batch), func(t *testing.T) {
				routes := map[string]*STA{}
				for _, r := range []string{"float", "integer, every spike", "integer, halves with spikes in 5 bins or more", "integer, default choice"} {
					s := NewSTA(st.pixels, st.lags)
					s.batchCap = batch
					switch r {
					case "float":
						s.fold.floatOnly = true
					case "integer, every spike":
						s.fold.minBins = 1
					case "integer, halves with spikes in 5 bins or more":
						s.fold.minBins = 5
					}
					st.feed(s, 500)
					routes[r] = s
				}
				float := routes["float"]
				for r, s := range routes {
					if b := s.fold.batches; r != "float" && (b[0] == 0 || b[1] == 0) {
						t.Fatalf("%s: %d batches by multiply-adds and %d by integer counts, want some of both", r, b[0], b[1])
					}
				}
				for r, s := range routes {
					for u := range st.units {
						for h := range 2 {
							got, ref := s.block(u, staA+h), float.block(u, staA+h)
							tol := float64(entries[u][h]+16) * 0x1p-53
							for i, g := range got {
								if tc.exact && (g != ref[i] || g != want[u][h][i]) {
									t.Fatalf("%s: unit %d half %d sum %d = %v, float route %v, exact %v: want all equal", r, u, h, i, g, ref[i], want[u][h][i])
								}
								if math.Abs(g-want[u][h][i]) > tol*size[u][h][i] {
									t.Fatalf("%s: unit %d half %d sum %d = %.17g, exact %.17g: off by more than %.3g", r, u, h, i, g, want[u][h][i], tol*size[u][h][i])
								}
							}
						}
					}
				}
			})
		}
	}
}

// TestSTALevelsRouteShapes compares the two-level route (every spike by
// integer counts) with the float route on ±1 frames and integer counts,
// where both must be exact, for shapes at the edges of the row sums: one
// pixel, one lag (no history rows), 64–70 lags (a history longer than the
// batch of 70), and rows of 17, 80 and 275 pixels (the AVX2 kernel's blocks
// of 256, 64 and 16 values and the rest in Go), with batches of 256 bins
// and of 70.
func TestSTALevelsRouteShapes(t *testing.T) {
	for _, sh := range []struct{ pixels, lags, batch int }{
		{1, 1, 256}, {3, 1, 70}, {1, 70, 256}, {5, 65, 70}, {2, 64, 256},
		{17, 3, 70}, {80, 12, 256}, {275, 2, 100},
	} {
		t.Run(fmt.Sprintf("pixels %d lags %d batch %d", sh.pixels, sh.lags, sh.batch), func(t *testing.T) {
			rng := rand.New(rand.NewPCG(uint64(sh.pixels), uint64(sh.lags)))
			frames := make([][]float64, 600)
			for m := range frames {
				frames[m] = make([]float64, sh.pixels)
				for p := range frames[m] {
					frames[m][p] = float64(2*rng.IntN(2) - 1)
				}
			}
			ints, float := NewSTA(sh.pixels, sh.lags), NewSTA(sh.pixels, sh.lags)
			ints.batchCap, float.batchCap = sh.batch, sh.batch
			ints.fold.minBins = 1
			float.fold.floatOnly = true
			x := make([]float64, sh.pixels*sh.lags)
			for k := sh.lags - 1; k < len(frames); k++ {
				staLagged(x, frames, k, sh.lags)
				var c []Count
				for u := range 3 {
					if rng.IntN(3) == 0 {
						c = append(c, Count{Unit: u, N: float64(1 + rng.IntN(3))})
					}
				}
				half := (k/50)%2 == 0
				ints.AddBin(x, half, c)
				float.AddBin(x, half, c)
			}
			ints.Flush()
			float.Flush()
			if ints.fold.batches[1] == 0 {
				t.Fatal("no batch went by integer counts")
			}
			for u := range 3 {
				for h := range 2 {
					got, want := ints.block(u, staA+h), float.block(u, staA+h)
					for i := range got {
						if got[i] != want[i] {
							t.Fatalf("unit %d half %d sum %d: integer %v, float %v", u, h, i, got[i], want[i])
						}
					}
				}
			}
		})
	}
}

// TestSTAFoldBesideAddBin: the fold of each full batch runs on its own
// goroutine while AddBin fills the next one. With batches of 16 bins many
// folds are under way when units arrive (Grow), when reads flush mid-batch
// and when the STA is Reset; the sums must still equal their definition,
// Σ_k c_k·x_k per unit and half, computed bin by bin: exactly, since ±1
// levels and integer counts make every sum an integer below 2⁵³. For both
// routes; run with -race too.
func TestSTAFoldBesideAddBin(t *testing.T) {
	const pixels, lags, units, frames, reset = 20, 4, 10, 900, 450 // Reset at the first batch end from bin 450 on
	D := pixels * lags
	for _, floatOnly := range []bool{false, true} {
		t.Run(fmt.Sprintf("float only %v", floatOnly), func(t *testing.T) {
			rng := rand.New(rand.NewPCG(41, 42))
			f := make([][]float64, frames)
			for m := range f {
				f[m] = make([]float64, pixels)
				for p := range f[m] {
					f[m][p] = float64(2*rng.IntN(2) - 1)
				}
			}
			s := NewSTA(pixels, lags)
			s.batchCap = 16
			s.fold.floatOnly = floatOnly
			want := make([][2][]float64, units)
			for u := range want {
				want[u] = [2][]float64{make([]float64, D), make([]float64, D)}
			}
			x := make([]float64, D)
			wasReset := false
			for k := lags - 1; k < frames; k++ {
				if k >= reset && !wasReset && s.batches[s.fill].n == 0 {
					// A batch has just filled: its fold is under way.
					s.Reset()
					wasReset = true
					for u := range want {
						clear(want[u][0])
						clear(want[u][1])
					}
				}
				staLagged(x, f, k, lags)
				var c []Count
				for u := range min(units, 1+k/60) { // unit u arrives at bin 60u
					if rng.IntN(4) == 0 {
						c = append(c, Count{Unit: u, N: float64(1 + rng.IntN(3))})
					}
				}
				half := (k/50)%2 == 0
				h := 1
				if half {
					h = 0
				}
				for _, cu := range c {
					for i, v := range x {
						want[cu.Unit][h][i] += cu.N * v
					}
				}
				s.AddBin(x, half, c)
				if k%37 == 0 {
					s.CrossTo(make([]float64, D), 0) // a read mid-batch
				}
			}
			s.Flush()
			if b := s.fold.batches; !floatOnly && b[1] == 0 {
				t.Fatalf("%d batches by multiply-adds and %d by integer counts, want some by integer counts", b[0], b[1])
			}
			for u := range units {
				for h := range 2 {
					got := s.block(u, staA+h)
					for i := range got {
						if got[i] != want[u][h][i] {
							t.Fatalf("unit %d half %d sum %d = %v, want %v", u, h, i, got[i], want[u][h][i])
						}
					}
				}
			}
		})
	}
}
