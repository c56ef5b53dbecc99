package display

import (
	"encoding/json"
	"math"
	"strconv"

	"livefield/online"
)

// Density is how much of each unit's map the overview shows, chosen by each
// browser; the hub sends every browser its tiles at its density only, so
// an update stays small as the units grow.
type Density string

// The densities, from the most detail to the least.
const (
	// Large tiles carry the peak-lag map at full resolution.
	Large Density = "large"
	// Medium tiles carry the map averaged down to at most MediumSide pixels
	// a side.
	Medium Density = "medium"
	// Compact tiles carry no map: id, status and numbers only.
	Compact Density = "compact"
)

// MediumSide bounds the side of a medium tile's map, in map pixels.
const MediumSide = 8

// mapLevels is the number of quantisation steps of a tile map on each side
// of zero. A tile is drawn on its own scale, ±max|map|, so 100 steps a side
// are finer than the eye tells apart on the colour scale (common practice,
// no source).
const mapLevels = 100

func parseDensity(s string) (Density, bool) {
	switch d := Density(s); d {
	case Large, Medium, Compact:
		return d, true
	}
	return "", false
}

// tileSnapshot is the websocket form of a Snapshot: the block header and
// summary as they are, each unit's numbers to four significant digits, and
// its map at the client's density.
type tileSnapshot struct {
	Block       string              `json:"block"`
	T           online.Float        `json:"t"`
	Bins        int64               `json:"bins"`
	Shape       [3]int              `json:"shape"`
	FramePeriod online.Float        `json:"frame_period_s"`
	Lambda      online.Float        `json:"lambda"`
	Summary     online.BlockSummary `json:"summary"`
	Density     Density             `json:"density"`
	// MapBlock is the side, in stimulus pixels, of the square that one
	// pixel of a tile's map averages (1: full resolution; absent: no maps).
	MapBlock int        `json:"map_block,omitempty"`
	Units    []tileUnit `json:"units"`
}

// tileUnit is one unit's tile. Map holds integers in [−100, 100] (null
// where undefined): the peak-lag map divided by MapMax, times 100, row-major
// MapShape[0]×MapShape[1]. Compact tiles have no map fields.
type tileUnit struct {
	ID           string        `json:"id"`
	Spikes       int64         `json:"spikes"`
	Status       online.Status `json:"status"`
	Reliability  short         `json:"reliability"`
	Significance short         `json:"significance"`
	ETA          short         `json:"eta_s"`
	Rate         short         `json:"rate_hz"`
	PeakLag      int           `json:"peak_lag"`
	LatencyMS    short         `json:"latency_ms"`
	CentreX      short         `json:"centre_x"`
	CentreY      short         `json:"centre_y"`
	SigmaX       short         `json:"sigma_x"`
	SigmaY       short         `json:"sigma_y"`
	Polarity     int           `json:"polarity"`
	HasSTC       bool          `json:"has_stc,omitempty"`
	Flagged      bool          `json:"flagged,omitempty"`
	PredictiveR  short         `json:"predictive_r"`
	// Estimate names the estimate the status comes from ("ridge" or
	// "prior"; absent for units not significant), PriorReliability the
	// smooth-local estimate's reliability: the tile shows the reliability
	// of the estimate the status comes from.
	Estimate         string `json:"estimate,omitempty"`
	PriorReliability short  `json:"prior_reliability"`
	// NoFieldSpikes is the count from which "no field" may be said (absent
	// once the unit is significant); Drift, with the centres of the field
	// early and late in the block, when the field moved.
	NoFieldSpikes short     `json:"no_field_spikes,omitempty"`
	Drift         bool      `json:"drift,omitempty"`
	DriftFrom     *[2]short `json:"drift_from,omitempty"`
	DriftTo       *[2]short `json:"drift_to,omitempty"`
	Map           any       `json:"map,omitempty"` // []int8, or levels when a value is undefined
	MapShape      *[2]int   `json:"map_shape,omitempty"`
	MapMax        short     `json:"map_max,omitempty"`
}

// tilesOf converts s for a browser at density d.
func tilesOf(s *online.Snapshot, d Density) *tileSnapshot {
	out := &tileSnapshot{
		Block: s.Block, T: s.T, Bins: s.Bins, Shape: s.Shape, FramePeriod: s.FramePeriod,
		Lambda: s.Lambda, Summary: s.Summary, Density: d, Units: make([]tileUnit, len(s.Units)),
	}
	height, width := s.Shape[1], s.Shape[2]
	switch d {
	case Large:
		out.MapBlock = 1
	case Medium:
		out.MapBlock = shrinkFactor(height, width, MediumSide)
	}
	for i, u := range s.Units {
		t := tileUnit{
			ID: u.ID, Spikes: u.Spikes, Status: u.Status,
			Reliability: short(u.Reliability), Significance: short(u.Significance), ETA: short(u.ETA),
			Rate: short(u.Rate), PeakLag: u.PeakLag, LatencyMS: short(u.LatencyMS),
			CentreX: short(u.CentreX), CentreY: short(u.CentreY), SigmaX: short(u.SigmaX), SigmaY: short(u.SigmaY),
			Polarity: u.Polarity, HasSTC: u.HasSTC, Flagged: u.Flagged,
			PredictiveR: short(u.PredictiveR), NoFieldSpikes: short(u.NoFieldSpikes), Drift: u.Drift,
			Estimate: u.Estimate, PriorReliability: short(u.PriorReliability),
		}
		if u.Drift {
			t.DriftFrom = &[2]short{short(u.DriftFrom[0]), short(u.DriftFrom[1])}
			t.DriftTo = &[2]short{short(u.DriftTo[0]), short(u.DriftTo[1])}
		}
		if d != Compact && len(u.Map) == width*height && width > 0 && height > 0 {
			m, h, w := u.Map, height, width
			if d == Medium {
				m, h, w = shrink(u.Map, height, width, MediumSide)
			}
			q, top := quantise(m)
			t.Map, t.MapMax = q.plain(), top
			t.MapShape = &[2]int{h, w}
		}
		out.Units[i] = t
	}
	return out
}

// shrink averages a height×width map over square blocks so that neither
// side exceeds side; undefined pixels are left out of a block's mean.
func shrink(m online.Floats, height, width, side int) (out online.Floats, h, w int) {
	f := shrinkFactor(height, width, side)
	if f == 1 {
		return m, height, width
	}
	h, w = (height+f-1)/f, (width+f-1)/f
	out = make(online.Floats, h*w)
	for r := range h {
		for c := range w {
			sum, n := 0.0, 0
			for y := r * f; y < min((r+1)*f, height); y++ {
				for x := c * f; x < min((c+1)*f, width); x++ {
					if v := float64(m[y*width+x]); !math.IsNaN(v) && !math.IsInf(v, 0) {
						sum += v
						n++
					}
				}
			}
			out[r*w+c] = online.Float(math.NaN())
			if n > 0 {
				out[r*w+c] = online.Float(sum / float64(n))
			}
		}
	}
	return out, h, w
}

// shrinkFactor is the smallest block side that brings height×width within
// side×side.
func shrinkFactor(height, width, side int) int {
	return max((height+side-1)/side, (width+side-1)/side, 1)
}

// quantise scales m to integers in [−mapLevels, mapLevels] by its largest
// finite |value|; undefined values become levelUndefined.
func quantise(m online.Floats) (levels, short) {
	top := maxAbs(m)
	q := make(levels, len(m))
	for i, v := range m {
		x := float64(v)
		switch {
		case math.IsNaN(x) || math.IsInf(x, 0):
			q[i] = levelUndefined
		case top > 0:
			q[i] = int8(math.Round(x / top * mapLevels))
		}
	}
	return q, short(top)
}

// levels is a quantised map; it encodes levelUndefined as null.
type levels []int8

// plain returns the levels as a plain []int8 when none is undefined, which
// encoding/json writes without the validation pass it gives the output of
// a MarshalJSON method (most of the encoding time of a large update).
func (q levels) plain() any {
	for _, v := range q {
		if v == levelUndefined {
			return q
		}
	}
	return []int8(q)
}

const levelUndefined = math.MinInt8

// MarshalJSON writes the levels as a JSON array of integers and nulls.
func (q levels) MarshalJSON() ([]byte, error) {
	b := make([]byte, 0, 2+4*len(q))
	b = append(b, '[')
	for i, v := range q {
		if i > 0 {
			b = append(b, ',')
		}
		if v == levelUndefined {
			b = append(b, "null"...)
			continue
		}
		b = strconv.AppendInt(b, int64(v), 10)
	}
	return append(b, ']'), nil
}

// short is a number sent to four significant digits, null when undefined:
// the tiles show two or three digits, and full precision would double an
// update's size.
type short float64

// MarshalJSON encodes non-finite values as null.
func (f short) MarshalJSON() ([]byte, error) {
	v := float64(f)
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return []byte("null"), nil
	}
	return strconv.AppendFloat(nil, v, 'g', 4, 64), nil
}

// encodeTiles prepares the snapshot message of s at density d.
func encodeTiles(s *online.Snapshot, d Density) ([]byte, error) {
	return json.Marshal(struct {
		Type     string        `json:"type"`
		Snapshot *tileSnapshot `json:"snapshot"`
	}{typeSnapshot, tilesOf(s, d)})
}
