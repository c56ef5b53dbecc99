package display

import (
	"bytes"
	"errors"
	"fmt"
	"image"
	"image/color"
	"image/png"
	"math"
	"math/rand/v2"
	"os"
	"regexp"
	"strconv"
	"testing"

	"livefield/online"
)

// lightness is CIE 1976 L* of an sRGB colour (sRGB transfer function from
// IEC 61966-2-1, D65 luminance weights 0.2126/0.7152/0.0722, L* from CIE
// 15:2004).
func lightness(c color.RGBA) float64 {
	lin := func(v uint8) float64 {
		x := float64(v) / 255
		if x <= 0.04045 {
			return x / 12.92
		}
		return math.Pow((x+0.055)/1.055, 2.4)
	}
	y := 0.2126*lin(c.R) + 0.7152*lin(c.G) + 0.0722*lin(c.B)
	if y > 216.0/24389 {
		return 116*math.Cbrt(y) - 16
	}
	return 24389.0 / 27 * y
}

func TestDivergingLightness(t *testing.T) {
	// A diverging scale is lightest at zero and darkens steadily towards
	// both ends, with the ends of about equal lightness, so that the sign is
	// read from hue and the size from lightness (common practice, no source).
	prev := -1.0
	for i := -20; i <= 0; i++ {
		l := lightness(Diverging(float64(i)/20, 1))
		if l <= prev {
			t.Fatalf("L* not increasing towards zero at %v: %.1f after %.1f", float64(i)/20, l, prev)
		}
		prev = l
	}
	for i := 1; i <= 20; i++ {
		l := lightness(Diverging(float64(i)/20, 1))
		if l >= prev {
			t.Fatalf("L* not decreasing away from zero at %v: %.1f after %.1f", float64(i)/20, l, prev)
		}
		prev = l
	}
	lo, hi := lightness(Diverging(-1, 1)), lightness(Diverging(1, 1))
	if math.Abs(lo-hi) > 12 {
		t.Errorf("ends differ in L*: %.1f and %.1f", lo, hi)
	}
	if mid := lightness(Diverging(0, 1)); mid < 90 {
		t.Errorf("zero has L* %.1f, want near white (≥ 90)", mid)
	}
}

func TestDivergingValues(t *testing.T) {
	rgb := func(s [3]uint8) color.RGBA { return color.RGBA{s[0], s[1], s[2], 255} }
	tests := []struct {
		name     string
		v, limit float64
		want     color.RGBA
	}{
		{"negative end", -2, 2, rgb(divergingStops[0])},
		{"zero", 0, 2, rgb(divergingStops[2])},
		{"positive end", 2, 2, rgb(divergingStops[4])},
		{"half way up", 1, 2, rgb(divergingStops[3])},
		{"clipped above", 50, 2, rgb(divergingStops[4])},
		{"clipped below", -50, 2, rgb(divergingStops[0])},
		{"no scale", 3, 0, rgb(divergingStops[2])},
		{"infinite scale", 3, math.Inf(1), rgb(divergingStops[2])},
		{"undefined", math.NaN(), 1, undefinedColour},
		{"between stops", 0.25, 1, color.RGBA{239, 197, 155, 255}}, // mean of stops 2 and 3, rounded
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			if got := Diverging(tc.v, tc.limit); got != tc.want {
				t.Fatalf("Diverging(%v, %v) = %v, want %v", tc.v, tc.limit, got, tc.want)
			}
		})
	}
}

// The page must draw with the same scale as the exported pictures.
func TestPageUsesSameColours(t *testing.T) {
	js, err := os.ReadFile("web/js/colour.js")
	if err != nil {
		t.Fatal(err)
	}
	line := regexp.MustCompile(`const DIVERGING = \[(.*)\];`).FindSubmatch(js)
	if line == nil {
		t.Fatal("colour.js: no DIVERGING table")
	}
	nums := regexp.MustCompile(`\d+`).FindAll(line[1], -1)
	if len(nums) != 15 {
		t.Fatalf("colour.js DIVERGING has %d numbers, want 15", len(nums))
	}
	for i, n := range nums {
		v, _ := strconv.Atoi(string(n))
		if want := int(divergingStops[i/3][i%3]); v != want {
			t.Fatalf("colour.js DIVERGING[%d][%d] = %d, png.go has %d", i/3, i%3, v, want)
		}
	}
}

func TestNaturalOrder(t *testing.T) {
	tests := []struct {
		a, b string
		less bool
	}{
		{"2", "10", true},
		{"10", "2", false},
		{"7", "12", true},
		{"ch2-u1", "ch10-u1", true},
		{"ch2-u10", "ch2-u9", false},
		{"a", "b", true},
		{"007", "8", true},
		{"12", "12", false},
		{"12", "12a", true},
		{"", "1", true},
	}
	for _, tc := range tests {
		if got := naturalCompare(tc.a, tc.b) < 0; got != tc.less {
			t.Errorf("naturalCompare(%q, %q) < 0 = %v, want %v", tc.a, tc.b, got, tc.less)
		}
	}
}

func decodePNG(t *testing.T, b []byte) image.Image {
	t.Helper()
	img, err := png.Decode(bytes.NewReader(b))
	if err != nil {
		t.Fatalf("not a PNG: %v", err)
	}
	return img
}

// extreme finds the stimulus pixel whose colour is farthest from the
// scale's white, in a map drawn at (x0, y0) with sc image pixels per
// stimulus pixel.
func extreme(img image.Image, x0, y0, sc, width, height int) (col, row int, c color.RGBA) {
	mid := divergingStops[2]
	best := -1
	for r := range height {
		for k := range width {
			p := color.RGBAModel.Convert(img.At(x0+k*sc+sc/2, y0+r*sc+sc/2)).(color.RGBA)
			d := iabs(int(p.R)-int(mid[0])) + iabs(int(p.G)-int(mid[1])) + iabs(int(p.B)-int(mid[2]))
			if d > best {
				best, col, row, c = d, k, r, p
			}
		}
	}
	return col, row, c
}

func iabs(v int) int {
	if v < 0 {
		return -v
	}
	return v
}

func near(col, row int, x, y float64) bool {
	return math.Abs(float64(col)-x) <= 1 && math.Abs(float64(row)-y) <= 1
}

func TestRenderOverviewShowsFields(t *testing.T) {
	snap := simulated(t)
	var b bytes.Buffer
	if err := RenderOverview(&b, snap); err != nil {
		t.Fatal(err)
	}
	img := decodePNG(t, b.Bytes())
	order := sortedUnits(snap.Units)
	sc := OverviewScale(len(order), simWidth, simHeight)
	for _, c := range simCells {
		if c.fieldless {
			continue
		}
		i := -1
		for k, u := range order {
			if u.ID == c.id {
				i = k
			}
		}
		if i < 0 {
			t.Fatalf("unit %s not in the snapshot", c.id)
		}
		x0, y0 := OverviewTileOrigin(i, len(order), simWidth, simHeight)
		col, row, px := extreme(img, x0, y0, sc, simWidth, simHeight)
		if !near(col, row, c.x, c.y) {
			t.Errorf("unit %s: strongest pixel at (%d, %d), the simulated field is centred at (%v, %v)", c.id, col, row, c.x, c.y)
		}
		// Bright-preferring fields are drawn in the orange half, dark in the blue.
		if warm := px.R > px.B; warm != c.on {
			t.Errorf("unit %s: peak colour %v, want the %s end", c.id, px, map[bool]string{true: "orange", false: "blue"}[c.on])
		}
	}
}

func TestRenderUnitShowsField(t *testing.T) {
	snap := simulated(t)
	d, _ := snap.Detail(strongCell.id)
	var b bytes.Buffer
	if err := RenderUnit(&b, snap, strongCell.id); err != nil {
		t.Fatal(err)
	}
	img := decodePNG(t, b.Bytes())
	sc := tileScale(simWidth, simHeight, lagMapPixels)
	cw, ch := simWidth*sc+2*tileBorder, simHeight*sc+2*tileBorder
	if want := rowLabel + simLags*(cw+tileGap) + tileGap; img.Bounds().Dx() != want {
		t.Fatalf("width %d, want %d (one map per lag)", img.Bounds().Dx(), want)
	}
	// The simulated field acts at lags 2 and 3 (weights 1 and 0.5).
	if d.Features.PeakLag != 2 {
		t.Errorf("peak lag %d, want 2", d.Features.PeakLag)
	}
	top := tileLabel + 2*tileGap
	for r := range 2 { // STA and ridge rows
		x0 := rowLabel + d.Features.PeakLag*(cw+tileGap) + tileBorder
		y0 := top + r*(ch+tileGap) + tileBorder
		col, row, px := extreme(img, x0, y0, sc, simWidth, simHeight)
		if !near(col, row, strongCell.x, strongCell.y) || px.R <= px.B {
			t.Errorf("row %d: strongest pixel %v at (%d, %d), want orange at (%v, %v)", r, px, col, row, strongCell.x, strongCell.y)
		}
	}
}

func TestRenderPopulation(t *testing.T) {
	s := &online.Snapshot{
		Shape: [3]int{1, 32, 32},
		Units: []online.UnitSummary{
			{ID: "1", Status: online.Reliable, CentreX: 10, CentreY: 12, SigmaX: 3, SigmaY: 3},
			{ID: "2", Status: online.Emerging, CentreX: 25, CentreY: 25, SigmaX: 3, SigmaY: 3},
		},
		Summary: online.BlockSummary{SuggestX: 15.5, SuggestY: 15.5, Aperture: 20},
	}
	var b bytes.Buffer
	if err := RenderPopulation(&b, s); err != nil {
		t.Fatal(err)
	}
	img := decodePNG(t, b.Bytes())
	sc := tileScale(32, 32, populationPixels)
	m := 2 * tileGap
	at := func(x, y float64) (int, int) {
		return m + int(math.Round((x+0.5)*float64(sc))), m + int(math.Round((y+0.5)*float64(sc)))
	}
	has := func(x, y int, want color.RGBA) bool {
		for dy := -2; dy <= 2; dy++ {
			for dx := -2; dx <= 2; dx++ {
				if color.RGBAModel.Convert(img.At(x+dx, y+dy)) == want {
					return true
				}
			}
		}
		return false
	}
	tests := []struct {
		name string
		x, y float64
		c    color.RGBA
		want bool
	}{
		{"reliable centre", 10, 12, fieldColour, true},
		{"reliable 1σ right", 13, 12, fieldColour, true},
		{"reliable 1σ above", 10, 9, fieldColour, true},
		{"inside the ellipse", 11.5, 12, fieldColour, false},
		{"emerging unit not drawn", 25, 25, fieldColour, false},
		{"aperture left edge", 5.5, 15.5, apertureColour, true},
		{"aperture top edge", 15.5 - 3, 5.5, apertureColour, true},
		{"aperture centre empty", 15.5, 15.5, apertureColour, false},
	}
	for _, tc := range tests {
		x, y := at(tc.x, tc.y)
		if got := has(x, y, tc.c); got != tc.want {
			t.Errorf("%s: colour %v near (%d, %d) = %v, want %v", tc.name, tc.c, x, y, got, tc.want)
		}
	}
}

func TestRenderErrors(t *testing.T) {
	s := &online.Snapshot{Shape: [3]int{2, 4, 4}}
	tests := []struct {
		name string
		err  error
		want error
	}{
		{"overview of nothing", RenderOverview(&bytes.Buffer{}, nil), ErrNoSnapshot},
		{"population of nothing", RenderPopulation(&bytes.Buffer{}, nil), ErrNoSnapshot},
		{"unit of nothing", RenderUnit(&bytes.Buffer{}, nil, "1"), ErrNoSnapshot},
		{"unknown unit", RenderUnit(&bytes.Buffer{}, s, "1"), ErrUnknownUnit},
		{"unknown unit npy", WriteRidgeNPY(&bytes.Buffer{}, s, "1"), ErrUnknownUnit},
	}
	for _, tc := range tests {
		if !errors.Is(tc.err, tc.want) {
			t.Errorf("%s: err %v, want %v", tc.name, tc.err, tc.want)
		}
	}
	if err := RenderOverview(&bytes.Buffer{}, &online.Snapshot{}); err == nil {
		t.Error("overview of a snapshot without shape: no error")
	}
	// A unit whose map has the wrong length is drawn grey, not a panic.
	bad := &online.Snapshot{Shape: [3]int{1, 4, 4}, Units: []online.UnitSummary{{ID: "1", Map: online.Floats{1, 2}}}}
	var b bytes.Buffer
	if err := RenderOverview(&b, bad); err != nil {
		t.Fatal(err)
	}
	img := decodePNG(t, b.Bytes())
	x0, y0 := OverviewTileOrigin(0, 1, 4, 4)
	if got := color.RGBAModel.Convert(img.At(x0+1, y0+1)); got != undefinedColour {
		t.Errorf("map of the wrong length drawn as %v, want %v", got, undefinedColour)
	}
}

func BenchmarkRenderOverview(b *testing.B) {
	snap := simulated(b)
	var buf bytes.Buffer
	b.ReportAllocs()
	for b.Loop() {
		buf.Reset()
		if err := RenderOverview(&buf, snap); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(buf.Len()), "png-bytes")
}

func TestDivergingDoesNotAllocate(t *testing.T) {
	// Diverging runs once per drawn pixel.
	if n := testing.AllocsPerRun(100, func() { Diverging(0.3, 1) }); n != 0 {
		t.Fatalf("Diverging allocates %v times per call", n)
	}
}

// BenchmarkRenderOverviewReference is the contact sheet of an export at
// the reference workload: 384 units of 16×16 maps (random values), a
// picture of 1968×2288 pixels.
func BenchmarkRenderOverviewReference(b *testing.B) {
	rng := rand.New(rand.NewPCG(1, 2))
	s := &online.Snapshot{Shape: [3]int{12, 16, 16}}
	for u := range 384 {
		m := make(online.Floats, 256)
		for i := range m {
			m[i] = online.Float(rng.NormFloat64())
		}
		s.Units = append(s.Units, online.UnitSummary{ID: fmt.Sprintf("u%d", u), Map: m})
	}
	var buf bytes.Buffer
	for b.Loop() {
		buf.Reset()
		if err := RenderOverview(&buf, s); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(buf.Len()), "png-bytes")
}

// TestOverviewScale: maps of 128 pixels across while the tiles fit in
// about 2048 pixels, smaller for hundreds of units, never below one pixel
// per stimulus pixel (the numbers follow the layout constants).
func TestOverviewScale(t *testing.T) {
	for _, tc := range []struct{ n, width, height, want int }{
		{1, 16, 16, 8},
		{64, 16, 16, 8},    // 8 columns of 128 + 18: 1168 pixels
		{384, 16, 16, 5},   // 20 columns: room for 84 pixels, 80 drawn
		{384, 32, 24, 2},   // 84 / 32
		{10000, 16, 16, 1}, // 100 columns: 2 pixels of room, still 1
	} {
		if got := OverviewScale(tc.n, tc.width, tc.height); got != tc.want {
			t.Errorf("OverviewScale(%d, %d, %d) = %d, want %d", tc.n, tc.width, tc.height, got, tc.want)
		}
	}
}
