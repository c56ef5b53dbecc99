package online

import (
	"errors"
	"math"
	"math/rand/v2"
	"strings"
	"testing"
)

// TestConfigLimits: one set of limits, and a refusal that says what fits.
func TestConfigLimits(t *testing.T) {
	for _, tc := range []struct {
		name string
		cfg  Config
		want string // in the message; "" for accepted
	}{
		{"64×64×3 fits", Config{Width: 64, Height: 64, Lags: 3}, ""},
		{"64×64×12", Config{Width: 64, Height: 64, Lags: 12}, "at 64×64 use at most 3 lags, or a grid of at most 36×36 at 12 lags"},
		{"too many pixels", Config{Width: 512, Height: 512, Lags: 1}, "coarser grid"},
		{"too many lags", Config{Width: 4, Height: 4, Lags: MaxLags + 1}, "need 1…64"},
		{"lambda below floor", Config{Width: 4, Height: 4, Lags: 2, Lambda: 1e-4}, "below the floor"},
		{"lambda at floor", Config{Width: 4, Height: 4, Lags: 2, Lambda: MinLambda}, ""},
		{"floor scales with variance", Config{Width: 4, Height: 4, Lags: 2, White: true, PixelVariance: 0.25, Lambda: MinLambda * 0.25}, ""},
	} {
		_, err := tc.cfg.withDefaults()
		switch {
		case tc.want == "" && err != nil:
			t.Errorf("%s: %v", tc.name, err)
		case tc.want != "" && (err == nil || !errors.Is(err, ErrConfig) || !strings.Contains(err.Error(), tc.want)):
			t.Errorf("%s: error %v, want ErrConfig saying %q", tc.name, err, tc.want)
		}
	}
}

// TestRidgeExactAtLambdaFloor: at the smallest accepted penalty the live
// ridge (block RLS) still equals the batch solve (lag cross-products, one
// Cholesky) after a minute of 60 Hz white noise, to 1e-8 relative: the
// floor keeps the recursion exact. Below it (λ = 1e-9) the agreement is
// worse.
func TestRidgeExactAtLambdaFloor(t *testing.T) {
	rel := func(lambda float64) float64 {
		cfg := Config{Width: 6, Height: 6, Lags: 4, White: true, PixelVariance: 1, Lambda: MinLambda}
		m, err := NewMapper(withoutPrior(cfg))
		if err != nil {
			t.Fatal(err)
		}
		m.cfg.Lambda = lambda // bypass the floor to show what it guards
		m.ridge, _ = NewRidge(m.dim, m.columns(m.capUnits), lambda)
		rng := rand.New(rand.NewPCG(71, 72))
		m.Unit("a")
		frame := make([]float64, 36)
		for k := 0; k < 3600; k++ {
			for i := range frame {
				frame[i] = float64(2*rng.IntN(2) - 1)
			}
			n := 0.0
			if frame[7]+frame[8] > 0 && rng.Float64() < 0.5 {
				n = 1
			}
			if err := m.AddBin(frame, []Count{{Unit: 0, N: n}}); err != nil {
				t.Fatal(err)
			}
		}
		s := m.Update()
		d, _ := s.Detail("a")
		w := [][]float64{make([]float64, m.dim)}
		b := []float64{0}
		if err := m.BatchRidgeTo(w, b, lambda); err != nil {
			t.Fatal(err)
		}
		var num, den float64
		for i, v := range d.Ridge {
			num += (float64(v) - w[0][i]) * (float64(v) - w[0][i])
			den += w[0][i] * w[0][i]
		}
		return math.Sqrt(num / den)
	}
	atFloor, below := rel(MinLambda), rel(1e-9)
	t.Logf("live vs batch, relative: %.2g at the floor λ = %g, %.2g at λ = 1e-9", atFloor, MinLambda, below)
	if atFloor > 1e-8 {
		t.Errorf("at the floor the live ridge is off by %.2g relative, want ≤ 1e-8", atFloor)
	}
}
