package display

import (
	"errors"
	"fmt"
	"image"
	"image/color"
	"image/png"
	"io"
	"math"
	"slices"
	"strings"

	"livefield/online"
)

// pngEncoder writes every picture with the fastest compression: the
// pictures are flat colour blocks, which deflate well at any level (the
// contact sheet of 384 units at its former size: 527 kB at the default
// level, 575 kB at this one, in a fraction of the time). Most of the time
// left is image/png's choice of a filter for every row.
var pngEncoder = png.Encoder{CompressionLevel: png.BestSpeed}

// ErrNoSnapshot is returned when there is nothing to draw yet.
var ErrNoSnapshot = errors.New("display: no snapshot yet")

// ErrUnknownUnit is returned (wrapped, with the id) for a unit the snapshot
// does not hold.
var ErrUnknownUnit = errors.New("display: unknown unit")

// divergingStops is the map colour scale, from −limit (index 0) through 0
// (index 2) to +limit (index 4): dark blue, light blue, warm white, light
// orange, burnt orange. Blue against orange stays distinct for the common
// red–green colour-vision deficiencies (common practice, no source). The
// page (web/js/colour.js, DIVERGING) uses the same five stops.
var divergingStops = [5][3]uint8{
	{36, 84, 168},
	{120, 170, 220},
	{246, 244, 238},
	{232, 150, 72},
	{160, 56, 10},
}

// Colours of the rest of the pictures.
var (
	undefinedColour = color.RGBA{170, 170, 170, 255} // a map value that is NaN
	backColour      = color.RGBA{32, 34, 40, 255}
	gridColour      = color.RGBA{62, 66, 76, 255}
	inkColour       = color.RGBA{236, 236, 236, 255}
	fieldColour     = color.RGBA{255, 214, 64, 255} // population ellipses
	apertureColour  = color.RGBA{120, 230, 255, 255}
)

// statusColours match the page's status badges.
var statusColours = map[online.Status]color.RGBA{
	online.Collecting: {128, 128, 136, 255},
	online.Emerging:   {222, 158, 0, 255},
	online.Reliable:   {0, 158, 115, 255},
	online.NoField:    {90, 60, 110, 255},
}

func statusColour(s online.Status) color.RGBA {
	if c, ok := statusColours[s]; ok {
		return c
	}
	return statusColours[online.Collecting]
}

// Diverging maps v in [−limit, +limit] to the map colour scale; values
// beyond are clipped, NaN is grey, and a limit ≤ 0 maps everything to the
// middle (white).
func Diverging(v, limit float64) color.RGBA {
	if math.IsNaN(v) {
		return undefinedColour
	}
	t := 0.0
	if limit > 0 && !math.IsInf(limit, 0) {
		t = v / limit
	}
	t = math.Max(-1, math.Min(1, t))
	x := (t + 1) * 2 // 0..4
	i := int(x)
	if i >= 4 {
		i = 3
	}
	f := x - float64(i)
	a, b := divergingStops[i], divergingStops[i+1]
	mix := func(p, q uint8) uint8 { return uint8(math.Round(float64(p)*(1-f) + float64(q)*f)) }
	return color.RGBA{mix(a[0], b[0]), mix(a[1], b[1]), mix(a[2], b[2]), 255}
}

// maxAbs is the largest finite |v| of m (0 when none).
func maxAbs(m online.Floats) float64 {
	lim := 0.0
	for _, v := range m {
		if a := math.Abs(float64(v)); a > lim && !math.IsInf(a, 0) {
			lim = a
		}
	}
	return lim
}

// tileScale is the number of image pixels per stimulus pixel, so that a
// map is about want image pixels across.
func tileScale(width, height, want int) int {
	return max(1, want/max(width, height, 1))
}

// drawMap paints a height×width map at (x0, y0), sc image pixels per
// stimulus pixel, scaled to ±limit. A map of the wrong length is drawn as
// undefined.
func drawMap(img *image.RGBA, x0, y0, sc, width, height int, m online.Floats, limit float64) {
	ok := len(m) == width*height
	for r := range height {
		for c := range width {
			col := undefinedColour
			if ok {
				col = Diverging(float64(m[r*width+c]), limit)
			}
			fillRect(img, x0+c*sc, y0+r*sc, sc, sc, col)
		}
	}
}

// fillRect paints the rectangle at (x, y), w×h, in c (clipped to the
// image): its first row pixel by pixel, the other rows copied from it.
func fillRect(img *image.RGBA, x, y, w, h int, c color.RGBA) {
	r := image.Rect(x, y, x+w, y+h).Intersect(img.Rect)
	if r.Empty() {
		return
	}
	first := img.Pix[img.PixOffset(r.Min.X, r.Min.Y) : img.PixOffset(r.Max.X-1, r.Min.Y)+4]
	for i := 0; i < len(first); i += 4 {
		first[i], first[i+1], first[i+2], first[i+3] = c.R, c.G, c.B, c.A
	}
	for yy := r.Min.Y + 1; yy < r.Max.Y; yy++ {
		copy(img.Pix[img.PixOffset(r.Min.X, yy):], first)
	}
}

func frameRect(img *image.RGBA, x, y, w, h, t int, c color.RGBA) {
	fillRect(img, x, y, w, t, c)
	fillRect(img, x, y+h-t, w, t, c)
	fillRect(img, x, y, t, h, c)
	fillRect(img, x+w-t, y, t, h, c)
}

// drawEllipse outlines the ellipse with centre (cx, cy), semi-axes a, b
// and angle th (radians, from the x axis, y pointing down the rows), all in
// image pixels.
func drawEllipse(img *image.RGBA, cx, cy, a, b, th float64, c color.RGBA) {
	if !finite(cx, cy, a, b) || a <= 0 || b <= 0 {
		return
	}
	if !finite(th) {
		th = 0
	}
	n := int(math.Max(48, 4*(a+b)))
	cs, sn := math.Cos(th), math.Sin(th)
	for i := range n {
		t := 2 * math.Pi * float64(i) / float64(n)
		u, v := a*math.Cos(t), b*math.Sin(t)
		x, y := cx+u*cs-v*sn, cy+u*sn+v*cs
		fillRect(img, int(math.Round(x))-1, int(math.Round(y))-1, 2, 2, c)
	}
}

func finite(v ...float64) bool {
	for _, x := range v {
		if math.IsNaN(x) || math.IsInf(x, 0) {
			return false
		}
	}
	return true
}

// naturalCompare orders unit ids with digit runs compared as numbers, so "2"
// comes before "10" and "ch2-u1" before "ch10-u1"; otherwise byte by byte.
// The page sorts the same way (web/js/order.js, naturalCompare).
func naturalCompare(a, b string) int {
	for a != "" && b != "" {
		da, db := digitRun(a), digitRun(b)
		if da > 0 && db > 0 {
			na, nb := strings.TrimLeft(a[:da], "0"), strings.TrimLeft(b[:db], "0")
			if len(na) != len(nb) {
				return len(na) - len(nb)
			}
			if c := strings.Compare(na, nb); c != 0 {
				return c
			}
			a, b = a[da:], b[db:]
			continue
		}
		if a[0] != b[0] {
			return int(a[0]) - int(b[0])
		}
		a, b = a[1:], b[1:]
	}
	return len(a) - len(b)
}

func digitRun(s string) int {
	n := 0
	for n < len(s) && s[n] >= '0' && s[n] <= '9' {
		n++
	}
	return n
}

// sortedUnits returns the units in natural id order.
func sortedUnits(units []online.UnitSummary) []online.UnitSummary {
	out := slices.Clone(units)
	slices.SortStableFunc(out, func(a, b online.UnitSummary) int { return naturalCompare(a.ID, b.ID) })
	return out
}

// Layout of the overview picture.
const (
	tileMapPixels = 128  // image pixels across a tile's map, at most
	sheetPixels   = 2048 // the picture's width that many tiles shrink their maps to fit
	tileBorder    = 5    // status-coloured frame
	tileLabel     = 16   // label strip above a tile's map
	tileGap       = 8
	labelScale    = 2 // image pixels per font pixel
)

// RenderOverview writes a PNG of every unit's map at its peak lag, one tile
// per unit in natural id order, framed in its status colour and labelled
// with its id; each map is scaled to ±max|map| of its own.
func RenderOverview(w io.Writer, s *online.Snapshot) error {
	if s == nil {
		return ErrNoSnapshot
	}
	_, height, width := s.Shape[0], s.Shape[1], s.Shape[2]
	if width <= 0 || height <= 0 {
		return fmt.Errorf("display: snapshot has no stimulus shape")
	}
	units := sortedUnits(s.Units)
	sc := OverviewScale(len(units), width, height)
	tw, th := width*sc+2*tileBorder, height*sc+2*tileBorder+tileLabel
	cols := overviewColumns(len(units))
	rows := max(1, (len(units)+cols-1)/cols)
	img := image.NewRGBA(image.Rect(0, 0, tileGap+cols*(tw+tileGap), tileGap+rows*(th+tileGap)))
	fillRect(img, 0, 0, img.Rect.Dx(), img.Rect.Dy(), backColour)
	for i, u := range units {
		x, y := tileGap+(i%cols)*(tw+tileGap), tileGap+(i/cols)*(th+tileGap)
		drawText(img, x, y+1, labelScale, u.ID, inkColour)
		fillRect(img, x, y+tileLabel, tw, th-tileLabel, statusColour(u.Status))
		x0, y0 := OverviewTileOrigin(i, len(units), width, height)
		drawMap(img, x0, y0, sc, width, height, u.Map, maxAbs(u.Map))
	}
	return pngEncoder.Encode(w, img)
}

// OverviewTileOrigin is the image position of the top-left stimulus pixel
// of tile i (in natural id order) of an overview of n units; one stimulus
// pixel spans OverviewScale image pixels.
func OverviewTileOrigin(i, n, width, height int) (x, y int) {
	sc := OverviewScale(n, width, height)
	tw, th := width*sc+2*tileBorder, height*sc+2*tileBorder+tileLabel
	cols := overviewColumns(n)
	return tileGap + (i%cols)*(tw+tileGap) + tileBorder, tileGap + (i/cols)*(th+tileGap) + tileLabel + tileBorder
}

// overviewColumns is the number of tile columns of an overview of n units:
// a square-ish grid.
func overviewColumns(n int) int { return max(1, int(math.Ceil(math.Sqrt(float64(n))))) }

// OverviewScale is the image pixels per stimulus pixel in an overview of
// n units: maps of up to tileMapPixels across, smaller when the tiles
// would make the picture wider than sheetPixels (hundreds of units: the
// export's contact sheet of 384 units of 16×16 gets 80-pixel maps and is
// 1968×2288, where 128-pixel maps made it 2928×3248, twice the pixels to
// draw, compress and page in).
func OverviewScale(n, width, height int) int {
	room := sheetPixels/overviewColumns(n) - tileGap - 2*tileBorder
	return tileScale(width, height, min(tileMapPixels, room))
}

// Layout of the unit picture.
const (
	lagMapPixels = 96
	rowLabel     = 40 // space left of each row for its name
)

// RenderUnit writes a PNG of one unit: three rows (STA, ridge, z) of its
// maps at every lag, each row scaled to ±max| | over its lags, the peak lag
// framed, and the fitted centre and 1σ extent drawn on the peak-lag ridge
// map.
func RenderUnit(w io.Writer, s *online.Snapshot, id string) error {
	if s == nil {
		return ErrNoSnapshot
	}
	d, ok := s.Detail(id)
	if !ok {
		return fmt.Errorf("%w %q", ErrUnknownUnit, id)
	}
	lags, height, width := d.Shape[0], d.Shape[1], d.Shape[2]
	if lags <= 0 || height <= 0 || width <= 0 {
		return fmt.Errorf("display: unit %q has no shape", id)
	}
	n := height * width
	sc := tileScale(width, height, lagMapPixels)
	cw, ch := width*sc+2*tileBorder, height*sc+2*tileBorder
	rowsOf := []struct {
		name string
		v    online.Floats
	}{{"STA", d.STA}, {"RDG", d.Ridge}, {"Z", d.Z}}
	top := tileLabel + 2*tileGap
	img := image.NewRGBA(image.Rect(0, 0, rowLabel+lags*(cw+tileGap)+tileGap, top+len(rowsOf)*(ch+tileGap)+tileGap))
	fillRect(img, 0, 0, img.Rect.Dx(), img.Rect.Dy(), backColour)
	drawText(img, tileGap, tileGap, labelScale, id, inkColour)
	drawText(img, tileGap+(len(id)+1)*4*labelScale, tileGap, labelScale, string(d.Status), statusColour(d.Status))
	for r, row := range rowsOf {
		y := top + r*(ch+tileGap)
		drawText(img, tileGap, y+ch/2-5, labelScale, row.name, inkColour)
		limit := maxAbs(row.v)
		for l := range lags {
			x := rowLabel + l*(cw+tileGap)
			var m online.Floats
			if len(row.v) == lags*n {
				m = row.v[l*n : (l+1)*n]
			}
			if l == d.Features.PeakLag {
				frameRect(img, x, y, cw, ch, tileBorder, inkColour)
			}
			drawMap(img, x+tileBorder, y+tileBorder, sc, width, height, m, limit)
			if r == 1 && l == d.Features.PeakLag {
				f := d.Features
				fs := float64(sc)
				drawEllipse(img, float64(x+tileBorder)+(float64(f.CentreX)+0.5)*fs, float64(y+tileBorder)+(float64(f.CentreY)+0.5)*fs,
					float64(f.SigmaX)*fs, float64(f.SigmaY)*fs, float64(f.Angle), fieldColour)
			}
		}
	}
	return pngEncoder.Encode(w, img)
}

// populationPixels is the image size of the longer side of the stimulus
// grid in the population picture.
const populationPixels = 512

// RenderPopulation writes a PNG of the stimulus grid with the centre and
// 1σ extent of every reliable unit, labelled by id, and the suggested
// aperture square.
func RenderPopulation(w io.Writer, s *online.Snapshot) error {
	if s == nil {
		return ErrNoSnapshot
	}
	height, width := s.Shape[1], s.Shape[2]
	if width <= 0 || height <= 0 {
		return fmt.Errorf("display: snapshot has no stimulus shape")
	}
	sc := tileScale(width, height, populationPixels)
	m := tileGap * 2
	img := image.NewRGBA(image.Rect(0, 0, width*sc+2*m, height*sc+2*m))
	fillRect(img, 0, 0, img.Rect.Dx(), img.Rect.Dy(), backColour)
	for c := 0; c <= width; c++ {
		fillRect(img, m+c*sc, m, 1, height*sc, gridColour)
	}
	for r := 0; r <= height; r++ {
		fillRect(img, m, m+r*sc, width*sc, 1, gridColour)
	}
	fs := float64(sc)
	at := func(x, y float64) (float64, float64) { return float64(m) + (x+0.5)*fs, float64(m) + (y+0.5)*fs }
	for _, u := range sortedUnits(s.Units) {
		if u.Status != online.Reliable || !finite(float64(u.CentreX), float64(u.CentreY)) {
			continue
		}
		x, y := at(float64(u.CentreX), float64(u.CentreY))
		angle := 0.0
		if d, ok := s.Detail(u.ID); ok {
			angle = float64(d.Features.Angle)
		}
		drawEllipse(img, x, y, float64(u.SigmaX)*fs, float64(u.SigmaY)*fs, angle, fieldColour)
		fillRect(img, int(x)-2, int(y)-2, 5, 5, fieldColour)
		drawText(img, int(x)+6, int(y)+6, 3, u.ID, inkColour)
	}
	b := s.Summary
	if finite(float64(b.SuggestX), float64(b.SuggestY), float64(b.Aperture)) && b.Aperture > 0 {
		x, y := at(float64(b.SuggestX), float64(b.SuggestY))
		half := float64(b.Aperture) * fs / 2
		x0, y0, side := int(math.Round(x-half)), int(math.Round(y-half)), int(math.Round(2*half))
		for i := 0; i < side; i += 12 { // dashed square
			l := min(7, side-i)
			fillRect(img, x0+i, y0, l, 2, apertureColour)
			fillRect(img, x0+i, y0+side-2, l, 2, apertureColour)
			fillRect(img, x0, y0+i, 2, l, apertureColour)
			fillRect(img, x0+side-2, y0+i, 2, l, apertureColour)
		}
	}
	return pngEncoder.Encode(w, img)
}

// glyphs is a 3×5 pixel font of our own for labels: five rows of three
// bits, most significant bit on the left.
var glyphs = map[rune][5]uint8{
	'0': {7, 5, 5, 5, 7}, '1': {2, 6, 2, 2, 7}, '2': {7, 1, 7, 4, 7}, '3': {7, 1, 3, 1, 7},
	'4': {5, 5, 7, 1, 1}, '5': {7, 4, 7, 1, 7}, '6': {7, 4, 7, 5, 7}, '7': {7, 1, 2, 2, 2},
	'8': {7, 5, 7, 5, 7}, '9': {7, 5, 7, 1, 7},
	'A': {2, 5, 7, 5, 5}, 'B': {6, 5, 6, 5, 6}, 'C': {3, 4, 4, 4, 3}, 'D': {6, 5, 5, 5, 6},
	'E': {7, 4, 6, 4, 7}, 'F': {7, 4, 6, 4, 4}, 'G': {3, 4, 5, 5, 3}, 'H': {5, 5, 7, 5, 5},
	'I': {7, 2, 2, 2, 7}, 'J': {1, 1, 1, 5, 2}, 'K': {5, 5, 6, 5, 5}, 'L': {4, 4, 4, 4, 7},
	'M': {5, 7, 7, 5, 5}, 'N': {6, 5, 5, 5, 5}, 'O': {2, 5, 5, 5, 2}, 'P': {6, 5, 6, 4, 4},
	'Q': {2, 5, 5, 6, 3}, 'R': {6, 5, 6, 5, 5}, 'S': {3, 4, 2, 1, 6}, 'T': {7, 2, 2, 2, 2},
	'U': {5, 5, 5, 5, 7}, 'V': {5, 5, 5, 5, 2}, 'W': {5, 5, 7, 7, 5}, 'X': {5, 5, 2, 5, 5},
	'Y': {5, 5, 2, 2, 2}, 'Z': {7, 1, 2, 4, 7},
	'-': {0, 0, 7, 0, 0}, '_': {0, 0, 0, 0, 7}, '.': {0, 0, 0, 0, 2}, ':': {0, 2, 0, 2, 0},
	'/': {1, 1, 2, 4, 4}, ' ': {},
}

// drawText writes s at (x, y) in the label font, sc image pixels per font
// pixel; unknown characters are drawn as a box.
func drawText(img *image.RGBA, x, y, sc int, s string, c color.RGBA) {
	for _, r := range strings.ToUpper(s) {
		g, ok := glyphs[r]
		if !ok {
			g = [5]uint8{7, 7, 7, 7, 7}
		}
		for row, bits := range g {
			for col := range 3 {
				if bits&(4>>col) != 0 {
					fillRect(img, x+col*sc, y+row*sc, sc, sc, c)
				}
			}
		}
		x += 4 * sc
	}
}
