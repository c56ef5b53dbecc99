package binning

import (
	"errors"
	"fmt"
	"math"
	"math/bits"

	"livefield/online"
)

// Defaults for the zero fields of Config.
const (
	DefaultGrace      = 0.25    // seconds
	DefaultMaxGap     = 10.0    // seconds
	DefaultMaxUnits   = 1 << 16 // unit indices 0…MaxUnits−1
	DefaultMaxPending = 1 << 20 // spikes waiting for frames
)

// Config sets up a Binner. Zero fields take the defaults above, except
// FramePeriod, which is required.
type Config struct {
	FramePeriod float64 // nominal frame period, seconds (> 0)
	Grace       float64 // seconds past a bin's end before it closes (≥ 0)
	MaxGap      float64 // longest frame interval that is still binned, seconds
	MaxUnits    int     // unit indices must be below this
	MaxPending  int     // spikes that may wait for their frame
}

// Bin is one closed bin.
type Bin struct {
	Frame      int64   // stimulus frame index shown
	Start, End float64 // [Start, End), seconds
	Held       bool    // one of the bins of a held frame
	// Counts has one entry per unit that fired, in increasing unit order.
	// Next reuses its storage.
	Counts []online.Count
}

// Stats are the running tallies of one Binner.
type Stats struct {
	Frames         int64 // frame onsets accepted
	RejectedFrames int64 // onsets refused (not after the previous, not finite, after End)
	Bins           int64 // bins handed out by Next
	HeldFrames     int64 // frames split into several bins
	HeldBins       int64 // bins those frames gave
	Gaps           int64 // intervals longer than MaxGap, not binned

	Spikes      int64 // spikes passed to AddSpikes
	Binned      int64 // added to a bin
	LateSpikes  int64 // fell in an already closed bin
	BeforeBlock int64 // before the first onset
	AfterBlock  int64 // at or after the block end
	GapSpikes   int64 // inside a gap
	Invalid     int64 // non-finite time or unit out of range
	Overflow    int64 // dropped: too many spikes waiting for frames
	Pending     int64 // waiting for the frame that closes their interval

	Watermark float64 // latest spike time or Advance time (NaN before any)
}

type ibin struct {
	frame      int64
	start, end float64
	held, gap  bool
	units      []int32
}

type spike struct {
	unit int32
	t    float64
}

// Binner bins one block. See the package doc.
type Binner struct {
	cfg Config

	// ring of bins: ring[(head+i)&mask], i < n; the first nClosed are
	// closed and wait for Next, the rest are open.
	ring    []ibin
	head, n int
	nClosed int

	first      float64 // first onset (NaN before)
	lastOnset  float64 // latest onset (NaN before)
	lastFrame  int64
	closedEnd  float64 // end of the last closed bin (−Inf before)
	blockEnd   float64 // +Inf until End
	ended      bool
	watermark  float64
	tail       []spike // spikes at or after lastOnset, or before any frame
	acc        []float64
	touched    []uint64 // countsTo's bit set of the units in a bin
	lateByUnit []int64
	st         Stats
}

// New returns a Binner for one block.
func New(cfg Config) (*Binner, error) {
	if !(cfg.FramePeriod > 0) || math.IsInf(cfg.FramePeriod, 0) {
		return nil, fmt.Errorf("binning: frame period %v must be finite and > 0", cfg.FramePeriod)
	}
	if cfg.Grace == 0 {
		cfg.Grace = DefaultGrace
	}
	if !(cfg.Grace >= 0) || math.IsInf(cfg.Grace, 0) {
		return nil, fmt.Errorf("binning: grace %v must be finite and ≥ 0", cfg.Grace)
	}
	if cfg.MaxGap == 0 {
		cfg.MaxGap = DefaultMaxGap
	}
	if !(cfg.MaxGap >= 1.5*cfg.FramePeriod) || math.IsInf(cfg.MaxGap, 0) {
		return nil, fmt.Errorf("binning: max gap %v must be finite and at least 1.5 frame periods", cfg.MaxGap)
	}
	if cfg.MaxUnits == 0 {
		cfg.MaxUnits = DefaultMaxUnits
	}
	if cfg.MaxUnits < 0 || cfg.MaxUnits > math.MaxInt32 {
		return nil, fmt.Errorf("binning: max units %d out of range", cfg.MaxUnits)
	}
	if cfg.MaxPending == 0 {
		cfg.MaxPending = DefaultMaxPending
	}
	if cfg.MaxPending < 0 {
		return nil, fmt.Errorf("binning: max pending %d must be > 0", cfg.MaxPending)
	}
	b := &Binner{
		cfg:       cfg,
		ring:      make([]ibin, 64),
		first:     math.NaN(),
		lastOnset: math.NaN(),
		closedEnd: math.Inf(-1),
		blockEnd:  math.Inf(1),
		watermark: math.NaN(),
	}
	return b, nil
}

// Config returns the configuration with defaults filled in.
func (b *Binner) Config() Config { return b.cfg }

func (b *Binner) at(i int) *ibin { return &b.ring[(b.head+i)&(len(b.ring)-1)] }

// push appends a bin, growing the ring when full (storage is kept).
func (b *Binner) push(frame int64, start, end float64, held, gap bool) {
	if b.n == len(b.ring) {
		r := make([]ibin, 2*len(b.ring))
		for i := 0; i < b.n; i++ {
			r[i] = *b.at(i)
		}
		b.ring, b.head = r, 0
	}
	x := b.at(b.n)
	x.frame, x.start, x.end, x.held, x.gap = frame, start, end, held, gap
	x.units = x.units[:0]
	b.n++
}

// addInterval makes the bins of frame f shown during [t0, t1).
func (b *Binner) addInterval(f int64, t0, t1 float64) {
	d, p := t1-t0, b.cfg.FramePeriod
	switch {
	case d > b.cfg.MaxGap:
		b.st.Gaps++
		b.push(f, t0, t1, false, true)
	case d > 1.5*p:
		k := int(math.Round(d / p))
		b.st.HeldFrames++
		b.st.HeldBins += int64(k)
		for i := 0; i < k; i++ {
			s, e := t0+d*float64(i)/float64(k), t0+d*float64(i+1)/float64(k)
			if i == k-1 {
				e = t1
			}
			b.push(f, s, e, true, false)
		}
	default:
		b.push(f, t0, t1, false, false)
	}
}

// AddFrames adds frame onsets: index[i] was shown from t[i]. Onsets must
// increase; refused ones are counted and the first is described by the
// returned error, while the rest are used.
func (b *Binner) AddFrames(index []int64, t []float64) error {
	if len(index) != len(t) {
		b.st.RejectedFrames += int64(max(len(index), len(t)))
		return fmt.Errorf("binning: %d frame indices but %d onsets", len(index), len(t))
	}
	var first error
	for i, ti := range t {
		var bad string
		switch {
		case b.ended:
			bad = "after the block end"
		case math.IsNaN(ti) || math.IsInf(ti, 0):
			bad = "not finite"
		case ti <= b.lastOnset:
			bad = fmt.Sprintf("not after the previous onset %v", b.lastOnset)
		}
		if bad != "" {
			b.st.RejectedFrames++
			if first == nil {
				first = fmt.Errorf("binning: frame %d onset %v %s: refused", index[i], ti, bad)
			}
			continue
		}
		b.st.Frames++
		if math.IsNaN(b.lastOnset) {
			b.first = ti
		} else {
			b.addInterval(b.lastFrame, b.lastOnset, ti)
		}
		b.lastOnset, b.lastFrame = ti, index[i]
	}
	b.settle()
	b.closeReady(false)
	return first
}

// settle moves waiting spikes whose bin is now known into it.
func (b *Binner) settle() {
	if len(b.tail) == 0 || math.IsNaN(b.first) {
		return
	}
	keep := b.tail[:0]
	for _, s := range b.tail {
		if s.t >= b.lastOnset && !b.ended {
			keep = append(keep, s)
			continue
		}
		b.place(s.unit, s.t)
	}
	b.tail = keep
}

// place files a spike whose time is before lastOnset or the block is ended.
func (b *Binner) place(u int32, t float64) {
	switch {
	case t < b.first:
		b.st.BeforeBlock++
	case t >= b.blockEnd:
		b.st.AfterBlock++
	case t < b.closedEnd:
		b.late(u)
	default:
		// Open bins: nClosed…n−1, sorted by start; find the last with
		// start ≤ t. Spikes mostly fall in the newest bins.
		lo, hi := b.nClosed, b.n
		for lo < hi {
			m := int(uint(lo+hi) >> 1)
			if b.at(m).start <= t {
				lo = m + 1
			} else {
				hi = m
			}
		}
		x := b.at(lo - 1)
		if x.gap {
			b.st.GapSpikes++
			return
		}
		x.units = append(x.units, u)
		b.st.Binned++
	}
}

func (b *Binner) late(u int32) {
	b.st.LateSpikes++
	if int(u) >= len(b.lateByUnit) {
		b.lateByUnit = append(b.lateByUnit, make([]int64, int(u)+1-len(b.lateByUnit))...)
	}
	b.lateByUnit[u]++
}

// AddSpikes adds spikes: unit units[i] fired at t[i]. Times need not be
// ordered. The watermark moves to the latest time.
func (b *Binner) AddSpikes(units []int, t []float64) {
	n := min(len(units), len(t))
	if extra := max(len(units), len(t)) - n; extra > 0 {
		b.st.Spikes += int64(extra)
		b.st.Invalid += int64(extra)
	}
	maxU := b.cfg.MaxUnits
	for i := 0; i < n; i++ {
		u, ti := units[i], t[i]
		b.st.Spikes++
		if u < 0 || u >= maxU || math.IsNaN(ti) || math.IsInf(ti, 0) {
			b.st.Invalid++
			continue
		}
		if !(ti <= b.watermark) {
			b.watermark = ti
		}
		if math.IsNaN(b.first) || (ti >= b.lastOnset && !b.ended) {
			if len(b.tail) >= b.cfg.MaxPending {
				b.st.Overflow++
				continue
			}
			b.tail = append(b.tail, spike{int32(u), ti})
			continue
		}
		b.place(int32(u), ti)
	}
	b.closeReady(false)
}

// Advance moves the watermark to t when t is later: no spike earlier than t
// is expected any more.
func (b *Binner) Advance(t float64) {
	if math.IsNaN(t) {
		return
	}
	if !(t <= b.watermark) {
		b.watermark = t
	}
	b.closeReady(false)
}

// End sets the block end at t, which closes the last frame's interval. Its
// bins close after the grace like any other (or at once with Flush). Later
// frames are refused; later spikes are counted as AfterBlock.
func (b *Binner) End(t float64) error {
	switch {
	case b.ended:
		return errors.New("binning: block already ended")
	case math.IsNaN(b.lastOnset):
		b.ended = true
		b.blockEnd = t
		b.first = t // every waiting spike is before or after the block
		b.settle()
		return errors.New("binning: block ended before any frame")
	case math.IsNaN(t) || math.IsInf(t, 0) || t <= b.lastOnset:
		return fmt.Errorf("binning: block end %v is not after the last onset %v", t, b.lastOnset)
	}
	b.addInterval(b.lastFrame, b.lastOnset, t)
	b.ended = true
	b.blockEnd = t
	b.settle()
	b.closeReady(false)
	return nil
}

// Flush closes every bin whose end is known, whatever the watermark.
func (b *Binner) Flush() { b.closeReady(true) }

// closeReady closes open bins whose spikes are complete.
func (b *Binner) closeReady(all bool) {
	for b.nClosed < b.n {
		x := b.at(b.nClosed)
		if !all && !(b.watermark >= x.end+b.cfg.Grace) {
			return
		}
		b.nClosed++
		b.closedEnd = x.end
	}
}

// Next writes the next closed bin into dst and reports whether there was one.
// Gaps are skipped.
func (b *Binner) Next(dst *Bin) bool {
	for b.nClosed > 0 {
		x := b.at(0)
		b.head = (b.head + 1) & (len(b.ring) - 1)
		b.n--
		b.nClosed--
		if x.gap {
			continue
		}
		dst.Frame, dst.Start, dst.End, dst.Held = x.frame, x.start, x.end, x.held
		dst.Counts = b.countsTo(dst.Counts[:0], x.units)
		b.st.Bins++
		return true
	}
	return false
}

// countsTo tallies units into per-unit counts in increasing unit order:
// the units seen are marked in a bit set, read back word by word (no sort).
func (b *Binner) countsTo(dst []online.Count, units []int32) []online.Count {
	for _, u := range units {
		if int(u) >= len(b.acc) {
			b.acc = append(b.acc, make([]float64, int(u)+1-len(b.acc))...)
			b.touched = append(b.touched, make([]uint64, (len(b.acc)+63)/64-len(b.touched))...)
		}
		b.touched[u>>6] |= 1 << (u & 63)
		b.acc[u]++
	}
	for w, bits64 := range b.touched {
		if bits64 == 0 {
			continue
		}
		for ; bits64 != 0; bits64 &= bits64 - 1 {
			u := w*64 + bits.TrailingZeros64(bits64)
			dst = append(dst, online.Count{Unit: u, N: b.acc[u]})
			b.acc[u] = 0
		}
		b.touched[w] = 0
	}
	return dst
}

// Late is the number of late spikes of one unit.
func (b *Binner) Late(unit int) int64 {
	if unit < 0 || unit >= len(b.lateByUnit) {
		return 0
	}
	return b.lateByUnit[unit]
}

// Stats returns the tallies so far.
func (b *Binner) Stats() Stats {
	s := b.st
	s.Watermark = b.watermark
	s.Pending = int64(len(b.tail))
	return s
}
