package online

import (
	"encoding/json"
	"math"
	"os"
	"testing"

	"gonum.org/v1/gonum/stat/distuv"
)

type calibGolden struct {
	F []struct {
		F, D1, D2, P, Log10P float64
	} `json:"f"`
	NCX2 []struct {
		X, DF, NC, SF float64
	} `json:"ncx2"`
}

func loadCalibGolden(t *testing.T) calibGolden {
	t.Helper()
	b, err := os.ReadFile("../testdata/golden/calib_golden.json")
	if err != nil {
		t.Fatal(err)
	}
	var g calibGolden
	if err := json.Unmarshal(b, &g); err != nil {
		t.Fatal(err)
	}
	return g
}

// TestFTailScipy: FTail against scipy.stats.f.sf and logsf
// (testdata/golden/calib_golden.py), to 1e-9 relative in p and 1e-9 in
// log10 p.
func TestFTailScipy(t *testing.T) {
	for _, c := range loadCalibGolden(t).F {
		p, nl := FTail(c.F, c.D1, c.D2)
		if math.Abs(p-c.P) > 1e-9*c.P || math.Abs(nl+c.Log10P) > 1e-9*math.Max(1, -c.Log10P) {
			t.Errorf("FTail(%g, %g, %g) = %g, %g; scipy %g, %g", c.F, c.D1, c.D2, p, nl, c.P, -c.Log10P)
		}
	}
}

// TestFTailMonotone: −log10 p keeps growing into the far tail, past where p
// underflows.
func TestFTailMonotone(t *testing.T) {
	last := -1.0
	for f := 0.5; f < 1e4; f *= 1.3 {
		_, nl := FTail(f, 144, 3000)
		if !(nl >= last) || math.IsInf(nl, 0) {
			t.Fatalf("FTail(%g): −log10 p = %g after %g", f, nl, last)
		}
		last = nl
	}
}

// TestNoncentralChiSquareScipy: NoncentralChiSquareTail against
// scipy.stats.ncx2.sf (testdata/golden/calib_golden.py), to 1e-8 absolute.
func TestNoncentralChiSquareScipy(t *testing.T) {
	for _, c := range loadCalibGolden(t).NCX2 {
		if got := NoncentralChiSquareTail(c.X, c.DF, c.NC); math.Abs(got-c.SF) > 1e-8 {
			t.Errorf("NoncentralChiSquareTail(%g, %g, %g) = %.12g, scipy %.12g", c.X, c.DF, c.NC, got, c.SF)
		}
	}
}

// TestFieldPowerPatnaik: the power rule's Patnaik (1949) approximation of
// the non-central chi-square is within 0.01 of the exact Poisson mixture
// (NoncentralChiSquareTail, itself checked against scipy) where the rule
// decides: powers between 0.5 and 0.99, dimensions 16 to 3072.
func TestFieldPowerPatnaik(t *testing.T) {
	for _, nu := range []float64{16, 144, 1000, 3072} {
		for j := 1; j <= 14; j++ {
			for _, N := range []float64{100, 300, 1000, 3000, 10000, 30000} {
				approx := fieldPower(0.001, j, nu, 1, 1, 0.04, N)
				if approx < 0.5 || approx > 0.99 {
					continue
				}
				crit := distuv.ChiSquared{K: nu}.Quantile(1 - LookLevel(0.001, j))
				exact := NoncentralChiSquareTail(crit, nu, N*0.04)
				if math.Abs(approx-exact) > 0.01 {
					t.Errorf("ν = %g, look %d, N = %g: Patnaik %.4f, exact %.4f", nu, j, N, approx, exact)
				}
			}
		}
	}
}
