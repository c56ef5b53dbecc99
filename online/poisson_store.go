package online

import (
	"errors"
	"fmt"
	"math"
)

// BinStore keeps one block's bins in compact form for the offline Poisson
// refinement (PoissonMAP): every frame once, as one byte per pixel while the
// stimulus has at most 256 distinct pixel values (binary and ternary noise
// always do) and as float64 otherwise, and each unit's non-zero counts as
// (bin, count) pairs. A used bin's lagged stimulus row is rebuilt from the
// frames on demand, so no bins × pixels·lags matrix is ever held: a 30-minute
// block of 16×16 binary noise at 60 Hz (108000 frames) takes 28 MB of
// frames plus 12 bytes per non-zero count.
//
// A BinStore is filled by one goroutine (Add); once filled it is read-only
// and PoissonMAP may be called on it from several goroutines.
type BinStore struct {
	width, height, lags, pixels int

	palette []float64         // distinct pixel values, while at most 256
	code    map[float64]uint8 // value → index in palette
	codes   []uint8           // frames × pixels, while the palette holds
	wide    []float64         // frames × pixels, once it has overflowed
	frames  int

	binFrame []int32 // per used bin, the index of its lag-0 frame
	units    map[int]*unitCounts
}

// unitCounts is one unit's non-zero counts, in bin order.
type unitCounts struct {
	bins   []int32
	counts []float64
	sum    float64 // Σ counts
	logFac float64 // Σ log(count!)
}

// NewBinStore returns an empty store for frames of width×height pixels
// regressed at lags lags.
func NewBinStore(width, height, lags int) (*BinStore, error) {
	if width <= 0 || height <= 0 || lags <= 0 || width*height > MaxPixels {
		return nil, fmt.Errorf("online: NewBinStore: frame %d×%d with %d lags", width, height, lags)
	}
	s := &BinStore{width: width, height: height, lags: lags, pixels: width * height}
	s.Reset()
	return s, nil
}

// Reset empties the store (the block's estimates were reset).
func (s *BinStore) Reset() {
	s.palette, s.code = s.palette[:0], map[float64]uint8{}
	s.codes, s.wide, s.frames = s.codes[:0], nil, 0
	s.binFrame = s.binFrame[:0]
	s.units = map[int]*unitCounts{}
}

// Bins is the number of used bins stored.
func (s *BinStore) Bins() int { return len(s.binFrame) }

// Bytes is the memory held by the frames, bins and counts (capacity not
// counted).
func (s *BinStore) Bytes() int64 {
	n := int64(len(s.codes)) + 8*int64(len(s.wide)) + 4*int64(len(s.binFrame))
	for _, u := range s.units {
		n += 12 * int64(len(u.bins))
	}
	return n
}

// errStoreBin is wrapped by Add's errors.
var errStoreBin = errors.New("online: bin store")

// Add appends one bin as the mapper took it (Mapper.AddBin): frame is the
// frame on screen, counts the spikes per unit index; used says whether the
// bin had its full lag history and so entered the estimates (an unused bin
// is kept as history for the next ones). A used bin regresses on the
// frames added just before it, so a restarted lag history must give Lags−1
// unused bins before the next used one, as the mapper does.
func (s *BinStore) Add(frame []float64, counts []Count, used bool) error {
	if len(frame) != s.pixels {
		return fmt.Errorf("%w: frame of %d pixels, want %d", errStoreBin, len(frame), s.pixels)
	}
	if used && s.frames+1 < s.lags {
		return fmt.Errorf("%w: a used bin after %d frames, need %d lags", errStoreBin, s.frames, s.lags)
	}
	if s.frames >= math.MaxInt32 {
		return fmt.Errorf("%w: more than %d frames", errStoreBin, math.MaxInt32)
	}
	s.addFrame(frame)
	if !used {
		return nil
	}
	bin := int32(len(s.binFrame))
	s.binFrame = append(s.binFrame, int32(s.frames-1))
	for _, c := range counts {
		if c.N == 0 {
			continue
		}
		u := s.units[c.Unit]
		if u == nil {
			u = &unitCounts{}
			s.units[c.Unit] = u
		}
		if k := len(u.bins) - 1; k >= 0 && u.bins[k] == bin {
			// A unit given twice in one bin: its counts add up.
			u.logFac -= logFactorial(u.counts[k])
			u.counts[k] += c.N
			u.logFac += logFactorial(u.counts[k])
		} else {
			u.bins = append(u.bins, bin)
			u.counts = append(u.counts, c.N)
			u.logFac += logFactorial(c.N)
		}
		u.sum += c.N
	}
	return nil
}

// logFactorial is log Γ(n+1).
func logFactorial(n float64) float64 {
	v, _ := math.Lgamma(n + 1)
	return v
}

// addFrame appends a frame as codes while the palette holds, else as
// float64 values (converting the codes stored so far once).
func (s *BinStore) addFrame(frame []float64) {
	s.frames++
	if s.wide == nil {
		for _, v := range frame {
			if _, ok := s.code[v]; !ok {
				if len(s.palette) == 256 {
					s.widen()
					s.wide = append(s.wide, frame...)
					return
				}
				s.code[v] = uint8(len(s.palette))
				s.palette = append(s.palette, v)
			}
		}
		for _, v := range frame {
			s.codes = append(s.codes, s.code[v])
		}
		return
	}
	s.wide = append(s.wide, frame...)
}

// widen turns the stored codes into float64 values.
func (s *BinStore) widen() {
	s.wide = make([]float64, len(s.codes), len(s.codes)+s.pixels)
	for i, c := range s.codes {
		s.wide[i] = s.palette[c]
	}
	s.codes = nil
}

// windowDesign is the design of one window over a store's used bins: row t
// holds the window's coefficients (lag, row, column order) of bin t.
type windowDesign struct {
	s    *BinStore
	lag  []int // per window coefficient, its lag
	pix  []int // per window coefficient, its pixel
	size int
}

func (s *BinStore) windowDesign(win PriorWindow) *windowDesign {
	d := &windowDesign{s: s, size: win.Size()}
	for t := range win.NT {
		for y := range win.NY {
			for x := range win.NX {
				d.lag = append(d.lag, win.T0+t)
				d.pix = append(d.pix, (win.Y0+y)*s.width+win.X0+x)
			}
		}
	}
	return d
}

func (d *windowDesign) bins() int { return len(d.s.binFrame) }
func (d *windowDesign) dim() int  { return d.size }

// rowsTo writes rows from…from+n−1 into dst (n×dim, row-major).
func (d *windowDesign) rowsTo(dst []float64, from, n int) {
	s, k := d.s, d.size
	for r := range n {
		f := int(s.binFrame[from+r])
		row := dst[r*k : (r+1)*k]
		if s.wide != nil {
			for i := range row {
				row[i] = s.wide[(f-d.lag[i])*s.pixels+d.pix[i]]
			}
			continue
		}
		for i := range row {
			row[i] = s.palette[s.codes[(f-d.lag[i])*s.pixels+d.pix[i]]]
		}
	}
}
