package display

import (
	"encoding/json"
	"fmt"
	"math"
	"slices"
	"testing"
	"time"

	"github.com/chromedp/chromedp"
)

// The page sorts unit ids and colours maps with its own JavaScript
// (web/js/order.js, web/js/colour.js); both must agree with the server's
// pictures and lists (png.go), value for value (issue 13 item 5).
func TestBrowserAgreesWithServer(t *testing.T) {
	ctx := newBrowser(t)
	srv := startPage(t, &rigSource{snap: snapAt(1)}, Options{Poll: 50 * time.Millisecond})
	if err := chromedp.Do(ctx, chromedp.Navigate(srv.URL+"/"), chromedp.WaitVisible(chromedp.ID("bar"))); err != nil {
		t.Fatal(err)
	}

	t.Run("natural order", func(t *testing.T) {
		ids := []string{"10", "2", "1", "007", "7", "8", "ch10-u1", "ch2-u1", "ch2-u10", "ch2-u9", "a", "b", "A",
			"", "12a", "12", "u", "u0", "u00", "ch02.1", "ch2.1", "ch2.01", "x-1", "x_1", "x1", "1x", "99999999999999999999",
			"100000000000000000000", "ä1", "z", "Z9", "9Z", "unit 3", "unit 12", "unit  3", "μ2", "μ10", "0", "00", "0a"}
		js, _ := json.Marshal(ids)
		// Every pair, compared both ways: only the sign must agree.
		got := evaluate[[][]int](t, ctx, fmt.Sprintf(`import('./static/js/order.js').then(m => {
  const ids = %s;
  return ids.map(a => ids.map(b => Math.sign(m.naturalCompare(a, b))));
})`, js))
		for i, a := range ids {
			for j, b := range ids {
				want := sign(naturalCompare(a, b))
				if got[i][j] != want {
					t.Errorf("naturalCompare(%q, %q): page %d, server %d", a, b, got[i][j], want)
				}
			}
		}
		sorted := slices.Clone(ids)
		slices.SortStableFunc(sorted, naturalCompare)
		t.Logf("server order: %q", sorted)
	})

	t.Run("colour scale", func(t *testing.T) {
		type sample struct{ V, Limit float64 }
		var samples []sample
		for _, limit := range []float64{1, 0.37, 2500, 0, -1} {
			for k := -60; k <= 60; k++ {
				samples = append(samples, sample{float64(k) / 50 * math.Abs(limit+0.5), limit})
			}
		}
		js, _ := json.Marshal(samples)
		got := evaluate[[][]int](t, ctx, fmt.Sprintf(`import('./static/js/colour.js').then(m =>
  %s.map(s => m.diverging(s.V, s.Limit)).concat([m.diverging(null, 1), m.diverging(NaN, 1)]))`, js))
		if len(got) != len(samples)+2 {
			t.Fatalf("page returned %d colours for %d samples", len(got), len(samples)+2)
		}
		for i, s := range samples {
			want := Diverging(s.V, s.Limit)
			if c := got[i]; c[0] != int(want.R) || c[1] != int(want.G) || c[2] != int(want.B) {
				t.Errorf("diverging(%v, %v): page %v, server %v", s.V, s.Limit, c, want)
			}
		}
		nan := Diverging(math.NaN(), 1)
		for _, c := range got[len(samples):] {
			if c[0] != int(nan.R) || c[1] != int(nan.G) || c[2] != int(nan.B) {
				t.Errorf("undefined value: page %v, server %v", c, nan)
			}
		}
	})
}

func sign(v int) int {
	switch {
	case v > 0:
		return 1
	case v < 0:
		return -1
	}
	return 0
}
