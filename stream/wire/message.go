package wire

import (
	"encoding/json"
	"math"
	"strconv"
	"unicode/utf8"
)

// Limits and defaults of the protocol.
const (
	// DefaultMaxSize is the largest message accepted by default: 1 MiB,
	// the default maximum payload of a NATS server.
	DefaultMaxSize = 1 << 20
	// MaxID is the longest unit or block id, in bytes.
	MaxID = 64
	// DefaultLags is the number of lags of a block start that omits "lags".
	DefaultLags = 12
	// MaxLags is the largest "lags" accepted: online.MaxLags, the mapper's
	// own limit (wire depends on nothing, so the number is repeated here and
	// a test in stream/ingest holds the two equal).
	MaxLags = 64
	// DefaultFramePeriod is the frame period (seconds) of a block start that
	// omits "frame_period": one frame of a 60 Hz display.
	DefaultFramePeriod = 1.0 / 60
	// MaxFramePeriod is the longest frame period accepted, in seconds.
	MaxFramePeriod = 10.0
)

// Message kinds of a block message.
const (
	KindStart = "start"
	KindEnd   = "end"
)

// Control commands.
const (
	CommandReset     = "reset"      // forget all estimates (the electrode moved)
	CommandFlagSTC   = "flag_stc"   // compute STC for Unit
	CommandUnflagSTC = "unflag_stc" // stop STC for Unit
	CommandCriterion = "criterion"  // set Target and Fraction
)

// Subject names, relative to the prefix.
const (
	SubjectBlock   = "block"
	SubjectFrames  = "frames"
	SubjectSpikes  = "spikes"
	SubjectControl = "control"
)

// Prefix is the default subject prefix of a rig: "livefield.<rig>".
func Prefix(rig string) string { return "livefield." + rig }

// Subject joins a prefix and one of the Subject constants.
func Subject(prefix, name string) string { return prefix + "." + name }

// Geometry is the screen geometry of a block, for degrees of visual angle.
type Geometry struct {
	DistanceCM  float64 `json:"distance_cm"`   // eye to screen, cm
	PixelSizeCM float64 `json:"pixel_size_cm"` // one stimulus pixel on the screen, cm
}

// Block is a block start or end.
type Block struct {
	Kind  string  `json:"kind"`  // KindStart or KindEnd
	Block string  `json:"block"` // block id, 1–64 bytes
	T     float64 `json:"t"`     // seconds, acquisition clock
	// The rest is present on a start only (and zero on an end).
	// Stimulus is the stimulus spec, a JSON object, kept verbatim.
	Stimulus json.RawMessage `json:"stimulus,omitempty"`
	// Lags is the number of frames of history per bin (DefaultLags when
	// the message omits it).
	Lags int `json:"lags,omitempty"`
	// FramePeriod is the display frame period in seconds
	// (DefaultFramePeriod when the message omits it).
	FramePeriod float64   `json:"frame_period,omitempty"`
	Geometry    *Geometry `json:"geometry,omitempty"` // nil when absent
}

// Frames is a batch of frame onsets: frame Index[i] of the block's
// stimulus went on screen at T[i] (seconds, acquisition clock).
type Frames struct {
	Block string    `json:"block"`
	Index []int64   `json:"index"`
	T     []float64 `json:"t"`
}

// Spikes is a batch of spikes: unit Unit[i] fired at T[i] (seconds,
// acquisition clock). Block is optional ("" when absent).
type Spikes struct {
	Block string    `json:"block,omitempty"`
	Unit  []string  `json:"unit"`
	T     []float64 `json:"t"`
}

// Control is an instruction from the experimenter.
type Control struct {
	Command string `json:"command"`
	// Unit is the unit of flag_stc and unflag_stc.
	Unit string `json:"unit,omitempty"`
	// Target and Fraction are the reliability target and the block
	// fraction of a criterion command, each in (0, 1].
	Target   float64 `json:"target,omitempty"`
	Fraction float64 `json:"fraction,omitempty"`
}

// checkID checks a unit or block id; i >= 0 is its index in an array.
func checkID(reason, field string, i int, id string) *Error {
	if id != "" && len(id) <= MaxID && utf8.ValidString(id) {
		return nil
	}
	if i >= 0 {
		field += "[" + strconv.Itoa(i) + "]"
	}
	if id == "" {
		return &Error{Reason: reason, Detail: field + ": empty"}
	}
	if len(id) > MaxID {
		return &Error{Reason: reason, Detail: field + ": " + strconv.Itoa(len(id)) + " bytes, more than " + strconv.Itoa(MaxID)}
	}
	if !utf8.ValidString(id) {
		return &Error{Reason: reason, Detail: field + ": invalid UTF-8"}
	}
	return nil
}

func checkTime(field string, t float64) *Error {
	if math.IsNaN(t) || math.IsInf(t, 0) {
		return &Error{Reason: ReasonNonFinite, Detail: field + ": not finite"}
	}
	if t < 0 {
		return &Error{Reason: ReasonNegativeTime, Detail: field + ": " + strconv.FormatFloat(t, 'g', -1, 64)}
	}
	return nil
}

// checkTimes checks a batch of times: finite, non-negative, and
// non-decreasing (strictly increasing when strict).
func checkTimes(t []float64, strict bool) *Error {
	prev := math.Inf(-1)
	for i, v := range t {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return &Error{Reason: ReasonNonFinite, Detail: "t[" + strconv.Itoa(i) + "]: not finite"}
		}
		if v < 0 {
			return &Error{Reason: ReasonNegativeTime, Detail: "t[" + strconv.Itoa(i) + "]: " + strconv.FormatFloat(v, 'g', -1, 64)}
		}
		if v < prev || (strict && v == prev) {
			return &Error{Reason: ReasonTimeOrder, Detail: "t[" + strconv.Itoa(i) + "]: " + strconv.FormatFloat(v, 'g', -1, 64) + " after " + strconv.FormatFloat(prev, 'g', -1, 64)}
		}
		prev = v
	}
	return nil
}

func (b *Block) check() *Error {
	switch b.Kind {
	case KindStart, KindEnd:
	default:
		return &Error{Reason: ReasonUnknownKind, Detail: "kind: " + strconv.Quote(b.Kind)}
	}
	if err := checkID(ReasonBadBlock, "block", -1, b.Block); err != nil {
		return err
	}
	if err := checkTime("t", b.T); err != nil {
		return err
	}
	if b.Kind == KindEnd {
		if b.Stimulus != nil || b.Lags != 0 || b.FramePeriod != 0 || b.Geometry != nil {
			return &Error{Reason: ReasonUnexpectedField, Detail: "stimulus, lags, frame_period and geometry belong to a start only"}
		}
		return nil
	}
	if len(b.Stimulus) == 0 {
		return &Error{Reason: ReasonMissingField, Detail: "stimulus"}
	}
	sc := scanner{data: b.Stimulus}
	if sc.peek() != '{' {
		return &Error{Reason: ReasonBadStimulus, Detail: "stimulus: want a JSON object"}
	}
	if err := sc.skip(1); err != nil {
		return err
	}
	if err := sc.end(); err != nil {
		return err
	}
	if b.Lags < 1 || b.Lags > MaxLags {
		return &Error{Reason: ReasonBadLags, Detail: "lags: " + strconv.Itoa(b.Lags) + " not in 1…" + strconv.Itoa(MaxLags)}
	}
	if !(b.FramePeriod > 0 && b.FramePeriod <= MaxFramePeriod) {
		return &Error{Reason: ReasonBadFramePeriod, Detail: "frame_period: " + strconv.FormatFloat(b.FramePeriod, 'g', -1, 64) + " s not in (0, 10]"}
	}
	if g := b.Geometry; g != nil {
		if !(g.DistanceCM > 0 && g.PixelSizeCM > 0) || math.IsInf(g.DistanceCM, 0) || math.IsInf(g.PixelSizeCM, 0) {
			return &Error{Reason: ReasonBadGeometry, Detail: "geometry: distance_cm and pixel_size_cm must be positive and finite"}
		}
	}
	return nil
}

func (f *Frames) check() *Error {
	if err := checkID(ReasonBadBlock, "block", -1, f.Block); err != nil {
		return err
	}
	if len(f.Index) != len(f.T) {
		return &Error{Reason: ReasonLengthMismatch, Detail: "index has " + strconv.Itoa(len(f.Index)) + " entries, t has " + strconv.Itoa(len(f.T))}
	}
	prev := int64(-1)
	for i, x := range f.Index {
		if x < 0 {
			return &Error{Reason: ReasonNegativeIndex, Detail: "index[" + strconv.Itoa(i) + "]: " + strconv.FormatInt(x, 10)}
		}
		if x <= prev {
			return &Error{Reason: ReasonIndexOrder, Detail: "index[" + strconv.Itoa(i) + "]: " + strconv.FormatInt(x, 10) + " after " + strconv.FormatInt(prev, 10)}
		}
		prev = x
	}
	return checkTimes(f.T, true)
}

func (s *Spikes) check() *Error {
	for i, u := range s.Unit {
		if err := checkID(ReasonBadUnit, "unit", i, u); err != nil {
			return err
		}
	}
	return s.checkDecoded()
}

// checkDecoded is check for a message whose unit ids the Decoder checked
// as it read them (each id once per decoder, not once per spike).
func (s *Spikes) checkDecoded() *Error {
	if s.Block != "" {
		if err := checkID(ReasonBadBlock, "block", -1, s.Block); err != nil {
			return err
		}
	}
	if len(s.Unit) != len(s.T) {
		return &Error{Reason: ReasonLengthMismatch, Detail: "unit has " + strconv.Itoa(len(s.Unit)) + " entries, t has " + strconv.Itoa(len(s.T))}
	}
	return checkTimes(s.T, false)
}

func (c *Control) check() *Error {
	unit, crit := false, false
	switch c.Command {
	case CommandReset:
	case CommandFlagSTC, CommandUnflagSTC:
		unit = true
	case CommandCriterion:
		crit = true
	default:
		return &Error{Reason: ReasonUnknownCommand, Detail: "command: " + strconv.Quote(c.Command)}
	}
	if unit {
		if err := checkID(ReasonBadUnit, "unit", -1, c.Unit); err != nil {
			return err
		}
	} else if c.Unit != "" {
		return &Error{Reason: ReasonUnexpectedField, Detail: "unit: not used by " + c.Command}
	}
	if crit {
		// The range is the estimator's rule (online.Criterion.Check), applied
		// where the criterion is used; here only the fields' presence.
		if c.Target == 0 || c.Fraction == 0 {
			return &Error{Reason: ReasonMissingField, Detail: "target and fraction are both needed"}
		}
	} else if c.Target != 0 || c.Fraction != 0 {
		return &Error{Reason: ReasonUnexpectedField, Detail: "target, fraction: not used by " + c.Command}
	}
	return nil
}
