package fastmat

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas64"
)

// reference computes C += alpha·X·Y with gonum's blas64.Gemm (the reference
// BLAS implementation the project already depends on).
func reference(m, n, k int, alpha float64, x []float64, ldx int, y []float64, ldy int, c []float64, ldc int) {
	if m == 0 || n == 0 {
		return
	}
	blas64.Gemm(blas.NoTrans, blas.NoTrans, alpha,
		blas64.General{Rows: m, Cols: k, Stride: ldx, Data: x},
		blas64.General{Rows: k, Cols: n, Stride: ldy, Data: y},
		1, blas64.General{Rows: m, Cols: n, Stride: ldc, Data: c})
}

func randSlice(rng *rand.Rand, n int) []float64 {
	s := make([]float64, n)
	for i := range s {
		s[i] = rng.NormFloat64()
	}
	return s
}

// mulAddCases are the shapes both products are checked on: full register
// blocks, ragged edges in every dimension, cache-block boundaries and
// padded strides.
var mulAddCases = []struct {
	m, n, k    int
	padX, padY int
	padC       int
	alpha      float64
}{
	{1, 1, 1, 0, 0, 0, 1},
	{3, 11, 5, 0, 0, 0, -1},   // below one register block: edges only
	{12, 16, 3, 0, 0, 0, 1},   // one AVX-512 block
	{25, 50, 33, 1, 2, 3, -1}, // ragged against both kernels
	{4, 12, 1, 0, 0, 0, 1},    // one block, k = 1 (odd tail of the unrolled loop)
	{4, 12, 2, 0, 0, 0, 0.5},  // one block, even k
	{8, 24, 7, 3, 5, 1, -2},   // padded strides
	{7, 13, 9, 0, 0, 0, 1},    // ragged rows and columns
	{60, 60, 300, 0, 0, 0, 1}, // k crosses the kc boundary
	{61, 301, 257, 2, 7, 3, -1},
	{130, 59, 513, 1, 1, 1, 0.25},
	{5, 600, 40, 0, 0, 0, 1},      // short and wide: split by columns
	{240, 60, 240, 2833, 0, 0, 1}, // a tile of the ridge's P (stride 3073) times a panel
	{0, 5, 5, 0, 0, 0, 1},
	{5, 5, 0, 0, 0, 0, 1},
}

// TestMulAddAgainstGemm compares the serial and the parallel product, and the
// serial product with X read transposed (Buf.MulAddT, X stored k×m), of every
// micro-kernel this CPU runs and of the pure-Go path with gonum's Dgemm (given
// blas.Trans for the transposed route) on mulAddCases.
func TestMulAddAgainstGemm(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	var b Buf
	saved := active
	defer func() { active = saved }()
	routes := []struct {
		name       string
		transposed bool
		mulAdd     func(m, n, k int, alpha float64, x []float64, ldx int, y []float64, ldy int, c []float64, ldc int)
	}{
		{"serial", false, b.MulAdd},
		{"parallel", false, MulAdd},
		{"transposed", true, b.MulAddT},
	}
	for _, kn := range append(append([]microKernel(nil), kernels...), microKernel{name: "go"}) {
		active = kn
		for _, tc := range mulAddCases {
			for _, route := range routes {
				name := fmt.Sprintf("%s/%s/m=%d,n=%d,k=%d,pads=%d/%d/%d", kn.name, route.name, tc.m, tc.n, tc.k, tc.padX, tc.padY, tc.padC)
				t.Run(name, func(t *testing.T) {
					xRows, xCols, xTrans := tc.m, tc.k, blas.NoTrans
					if route.transposed {
						xRows, xCols, xTrans = tc.k, tc.m, blas.Trans
					}
					ldx, ldy, ldc := max(xCols, 1)+tc.padX, max(tc.n, 1)+tc.padY, max(tc.n, 1)+tc.padC
					x := randSlice(rng, max(xRows, 1)*ldx)
					y := randSlice(rng, max(tc.k, 1)*ldy)
					c0 := randSlice(rng, max(tc.m, 1)*ldc)
					want := append([]float64(nil), c0...)
					if tc.m > 0 && tc.n > 0 {
						blas64.Gemm(xTrans, blas.NoTrans, tc.alpha,
							blas64.General{Rows: xRows, Cols: xCols, Stride: ldx, Data: x},
							blas64.General{Rows: tc.k, Cols: tc.n, Stride: ldy, Data: y},
							1, blas64.General{Rows: tc.m, Cols: tc.n, Stride: ldc, Data: want})
					}
					got := append([]float64(nil), c0...)
					route.mulAdd(tc.m, tc.n, tc.k, tc.alpha, x, ldx, y, ldy, got, ldc)
					// Padding between rows must be left untouched, so compare everything.
					for i := range got {
						tol := 1e-12 * float64(tc.k+1) * (1 + math.Abs(want[i]))
						if math.Abs(got[i]-want[i]) > tol {
							t.Fatalf("c[%d] = %v, Dgemm gives %v", i, got[i], want[i])
						}
					}
				})
			}
		}
	}
}

// TestGoPathAgainstGemm checks the pure-Go path alone (the path taken on CPUs
// without AVX2 and FMA) against Dgemm.
func TestGoPathAgainstGemm(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	m, n, k, ld := 9, 14, 17, 20
	x, y, c := randSlice(rng, m*ld), randSlice(rng, k*ld), randSlice(rng, m*ld)
	want := append([]float64(nil), c...)
	reference(m, n, k, 1.5, x, ld, y, ld, want, ld)
	goMulAdd(m, n, k, 1.5, x, ld, 1, y, ld, c, ld)
	for i := range c {
		if math.Abs(c[i]-want[i]) > 1e-12*(1+math.Abs(want[i])) {
			t.Fatalf("c[%d] = %v, Dgemm gives %v", i, c[i], want[i])
		}
	}
}

func TestMulAddDoesNotAllocate(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	m, n, k := 120, 96, 300
	x, y, c := randSlice(rng, m*k), randSlice(rng, k*n), make([]float64, m*n)
	MulAdd(m, n, k, 1, x, k, y, n, c, n) // grow the buffers
	if a := testing.AllocsPerRun(5, func() { MulAdd(m, n, k, 1, x, k, y, n, c, n) }); a != 0 {
		t.Errorf("MulAdd allocates %v times per call", a)
	}
}

func TestMulAddPanicsOnShortOperand(t *testing.T) {
	defer func() {
		if recover() == nil {
			t.Error("no panic for a short y")
		}
	}()
	MulAdd(2, 2, 2, 1, make([]float64, 4), 2, make([]float64, 3), 2, make([]float64, 4), 2)
}

type countTask struct{ hits []int }

func (c *countTask) Do(i, w int) { c.hits[i]++ }

func TestEachRunsEveryPieceOnce(t *testing.T) {
	ct := &countTask{hits: make([]int, 37)}
	Each(len(ct.hits), ct)
	for i, h := range ct.hits {
		if h != 1 {
			t.Fatalf("piece %d ran %d times", i, h)
		}
	}
}

func ExampleMulAdd() {
	// C (2×2) += X (2×3) · Y (3×2)
	x := []float64{1, 2, 3, 4, 5, 6}
	y := []float64{1, 0, 0, 1, 1, 1}
	c := []float64{10, 10, 10, 10}
	MulAdd(2, 2, 3, 1, x, 3, y, 2, c, 2)
	fmt.Println(c)
	// Output: [14 15 20 21]
}
