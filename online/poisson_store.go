package online

import (
	"errors"
	"fmt"
	"math"
)

// BinStore keeps one block's bins in compact form for the offline Poisson
// refinement (PoissonMAP): every frame once, as palette codes of 1, 2, 4 or 8
// bits per pixel while the stimulus has at most 256 distinct pixel values
// (binary noise: one bit) and as float64 otherwise, and each unit's
// non-zero counts as (bin, count) pairs of 5 bytes while the counts are
// whole numbers up to 255 (12 bytes otherwise). A used bin's lagged
// stimulus row is rebuilt from the frames on demand, so no bins × pixels·lags
// matrix is ever held: a 30-minute block of 16×16 binary noise at 60 Hz
// (108000 frames) takes 3.5 MB of frames plus 5 bytes per non-zero count.
//
// A BinStore is filled by one goroutine (Add); once filled it is read-only
// and PoissonMAP may be called on it from several goroutines.
type BinStore struct {
	width, height, lags, pixels int

	palette    []float64         // distinct pixel values, while at most 256
	code       map[float64]uint8 // value → index in palette
	bits       int               // bits per packed code: 1, 2, 4 or 8 (0 before the first frame)
	frameBytes int               // bytes per packed frame
	packed     []byte            // frames × frameBytes, while the palette holds
	wide       []float64         // frames × pixels, once it has overflowed
	frames     int
	scratch    []uint8 // one frame's codes

	binFrame []int32 // per used bin, the index of its lag-0 frame
	units    map[int]*unitCounts
}

// unitCounts is one unit's non-zero counts, in bin order.
type unitCounts struct {
	bins   []int32
	small  []uint8   // the counts, while each is a whole number ≤ 255
	wide   []float64 // the counts, once one is not
	sum    float64   // Σ counts
	logFac float64   // Σ log(count!)
}

func (u *unitCounts) at(k int) float64 {
	if u.wide != nil {
		return u.wide[k]
	}
	return float64(u.small[k])
}

// set changes count k (k = len(bins) appends).
func (u *unitCounts) set(k int, v float64) {
	if u.wide == nil && (v != math.Trunc(v) || v > math.MaxUint8) {
		u.wide = make([]float64, len(u.small), len(u.small)+1)
		for i, c := range u.small {
			u.wide[i] = float64(c)
		}
		u.small = nil
	}
	switch {
	case u.wide != nil && k == len(u.wide):
		u.wide = append(u.wide, v)
	case u.wide != nil:
		u.wide[k] = v
	case k == len(u.small):
		u.small = append(u.small, uint8(v))
	default:
		u.small[k] = uint8(v)
	}
}

// NewBinStore returns an empty store for frames of width×height pixels
// regressed at lags lags.
func NewBinStore(width, height, lags int) (*BinStore, error) {
	if width <= 0 || height <= 0 || lags <= 0 || width*height > MaxPixels {
		return nil, fmt.Errorf("online: NewBinStore: frame %d×%d with %d lags", width, height, lags)
	}
	s := &BinStore{width: width, height: height, lags: lags, pixels: width * height, scratch: make([]uint8, width*height)}
	s.Reset()
	return s, nil
}

// Reset empties the store (the block's estimates were reset).
func (s *BinStore) Reset() {
	s.palette, s.code = s.palette[:0], map[float64]uint8{}
	s.bits, s.frameBytes = 0, 0
	s.packed, s.wide, s.frames = s.packed[:0], nil, 0
	s.binFrame = s.binFrame[:0]
	s.units = map[int]*unitCounts{}
}

// Bins is the number of used bins stored.
func (s *BinStore) Bins() int { return len(s.binFrame) }

// Bytes is the memory held by the frames, bins and counts (capacity not
// counted).
func (s *BinStore) Bytes() int64 {
	n := int64(len(s.packed)) + 8*int64(len(s.wide)) + 4*int64(len(s.binFrame))
	for _, u := range s.units {
		n += 4*int64(len(u.bins)) + int64(len(u.small)) + 8*int64(len(u.wide))
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
// unused bins before the next used one, as the mapper does. Counts must be
// finite and ≥ 0 (the mapper checked them).
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
	for _, c := range counts {
		if !(c.N >= 0) || math.IsInf(c.N, 0) {
			return fmt.Errorf("%w: count %v", errStoreBin, c.N)
		}
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
			u.logFac -= logFactorial(u.at(k))
			u.set(k, u.at(k)+c.N)
			u.logFac += logFactorial(u.at(k))
		} else {
			u.set(len(u.bins), c.N)
			u.bins = append(u.bins, bin)
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

// addFrame appends a frame as packed codes while the palette holds, else as
// float64 values (converting the frames stored so far once).
func (s *BinStore) addFrame(frame []float64) {
	defer func() { s.frames++ }()
	if s.wide != nil {
		s.wide = append(s.wide, frame...)
		return
	}
	for p, v := range frame {
		c, ok := s.code[v]
		if !ok {
			if len(s.palette) == 256 {
				s.widen()
				s.wide = append(s.wide, frame...)
				return
			}
			c = uint8(len(s.palette))
			s.code[v] = c
			s.palette = append(s.palette, v)
		}
		s.scratch[p] = c
	}
	if need := codeBits(len(s.palette)); need > s.bits {
		s.repack(need)
	}
	off := len(s.packed)
	s.packed = append(s.packed, make([]byte, s.frameBytes)...)
	dst := s.packed[off:]
	for p, c := range s.scratch {
		bit := p * s.bits
		dst[bit>>3] |= c << (bit & 7)
	}
}

// codeBits is the bits per code for a palette of n values: 1, 2, 4 or 8.
func codeBits(n int) int {
	for _, b := range []int{1, 2, 4} {
		if n <= 1<<b {
			return b
		}
	}
	return 8
}

// codeAt is the palette index of pixel p of stored frame f.
func (s *BinStore) codeAt(f, p int) uint8 {
	bit := p * s.bits
	return (s.packed[f*s.frameBytes+bit>>3] >> (bit & 7)) & uint8(1<<s.bits-1)
}

// repack re-stores the frames so far at bits bits per code.
func (s *BinStore) repack(bits int) {
	fb := (s.pixels*bits + 7) / 8
	packed := make([]byte, s.frames*fb, (s.frames+1)*fb)
	for f := range s.frames {
		for p := range s.pixels {
			bit := p * bits
			packed[f*fb+bit>>3] |= s.codeAt(f, p) << (bit & 7)
		}
	}
	s.packed, s.bits, s.frameBytes = packed, bits, fb
}

// widen turns the frames stored so far into float64 values.
func (s *BinStore) widen() {
	s.wide = make([]float64, s.frames*s.pixels, (s.frames+1)*s.pixels)
	for f := range s.frames {
		for p := range s.pixels {
			s.wide[f*s.pixels+p] = s.palette[s.codeAt(f, p)]
		}
	}
	s.packed = nil
}

// windowDesign is the design of one window over a store's used bins: row t
// holds the window's coefficients (lag, row, column order) of bin t. It
// decodes each frame's window pixels once per chunk of rows and copies them
// into the rows of the bins that see the frame (one per lag), instead of
// decoding every coefficient of every row. It belongs to one goroutine.
type windowDesign struct {
	s      *BinStore
	win    PriorWindow
	plane  int     // window pixels per lag, NX·NY
	pix    []int   // per window pixel (row, column order), its frame pixel
	off    []int   // and its byte in a packed frame
	shift  []uint8 // and its bit in that byte
	size   int
	frames []float64 // decoded window pixels of the frames of a chunk
}

func (s *BinStore) windowDesign(win PriorWindow) *windowDesign {
	d := &windowDesign{s: s, win: win, plane: win.NX * win.NY, size: win.Size()}
	for y := range win.NY {
		for x := range win.NX {
			p := (win.Y0+y)*s.width + win.X0 + x
			d.pix = append(d.pix, p)
			d.off = append(d.off, p*s.bits>>3)
			d.shift = append(d.shift, uint8(p*s.bits&7))
		}
	}
	return d
}

func (d *windowDesign) bins() int { return len(d.s.binFrame) }
func (d *windowDesign) dim() int  { return d.size }

// rowsTo writes rows from…from+n−1 into dst (n×dim, row-major).
func (d *windowDesign) rowsTo(dst []float64, from, n int) {
	s, w := d.s, d.win
	// The frames the rows read: lags T0…T0+NT−1 before each bin's frame.
	lo := int(s.binFrame[from]) - (w.T0 + w.NT - 1)
	hi := int(s.binFrame[from+n-1]) - w.T0
	nf := hi - lo + 1
	if need := nf * d.plane; len(d.frames) < need {
		d.frames = make([]float64, need)
	}
	mask := uint8(1<<s.bits - 1)
	for f := range nf {
		dec := d.frames[f*d.plane : (f+1)*d.plane]
		if s.wide != nil {
			base := (lo + f) * s.pixels
			for q, p := range d.pix {
				dec[q] = s.wide[base+p]
			}
			continue
		}
		frame := s.packed[(lo+f)*s.frameBytes : (lo+f+1)*s.frameBytes]
		for q, o := range d.off {
			dec[q] = s.palette[(frame[o]>>d.shift[q])&mask]
		}
	}
	for r := range n {
		f := int(s.binFrame[from+r]) - lo
		row := dst[r*d.size : (r+1)*d.size]
		for t := range w.NT {
			src := f - (w.T0 + t)
			copy(row[t*d.plane:(t+1)*d.plane], d.frames[src*d.plane:(src+1)*d.plane])
		}
	}
}
