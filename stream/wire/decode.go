package wire

import (
	"strconv"
)

// maxIntern bounds the unit ids a Decoder remembers.
const maxIntern = 4096

// Decoder decodes messages, reusing the caller's slices and sharing the
// string of a unit id across messages. The zero value is ready to use with
// DefaultMaxSize. A Decoder is not safe for concurrent use.
type Decoder struct {
	// MaxSize is the largest message accepted, in bytes (0 = DefaultMaxSize).
	MaxSize int

	sc     scanner
	intern map[string]string
}

func (d *Decoder) start(data []byte) *Error {
	max := d.MaxSize
	if max <= 0 {
		max = DefaultMaxSize
	}
	if len(data) > max {
		return &Error{Reason: ReasonTooLarge, Detail: strconv.Itoa(len(data)) + " bytes, limit " + strconv.Itoa(max)}
	}
	d.sc.data, d.sc.pos = data, 0
	return nil
}

// id returns an id string, shared with earlier messages when seen before.
// Only valid ids (checkID) are remembered, so that an id found among them
// needs no check again.
func (d *Decoder) id(b []byte) string {
	if s, ok := d.intern[string(b)]; ok {
		return s
	}
	s := string(b)
	if checkID("", "", -1, s) != nil {
		return s // the message's check reports it
	}
	if d.intern == nil {
		d.intern = make(map[string]string)
	}
	if len(d.intern) >= maxIntern {
		clear(d.intern)
	}
	d.intern[s] = s
	return s
}

// floatsTo appends an array of numbers of field to dst.
func (s *scanner) floatsTo(dst *[]float64, field string) *Error {
	return s.array(field, func() *Error {
		v, err := s.float(field)
		*dst = append(*dst, v)
		return err
	})
}

// strField reads a string value of field.
func (s *scanner) strField(field string) ([]byte, *Error) {
	if s.peek() != '"' {
		return nil, s.typeErr(field, "string")
	}
	return s.str()
}

func missing(field string) *Error {
	return &Error{Reason: ReasonMissingField, Detail: field}
}

// fail keeps the error type concrete inside the package and returns a
// plain nil error on success.
func done(err *Error) error {
	if err != nil {
		return err
	}
	return nil
}

// message decodes one top-level object whose known keys are keys, of which
// the first required must be present; it reports which keys were present.
func (d *Decoder) message(data []byte, what string, keys []string, required int, member func(k int) *Error) ([8]bool, *Error) {
	var have [8]bool
	if err := d.start(data); err != nil {
		return have, err
	}
	s := &d.sc
	err := s.object(what, keys, func(k int) *Error {
		have[k] = true
		return member(k)
	})
	if err == nil {
		err = s.end()
	}
	if err != nil {
		return have, err
	}
	for i, name := range keys[:required] {
		if !have[i] {
			return have, missing(name)
		}
	}
	return have, nil
}

var spikeKeys = []string{"unit", "t", "block"}

// SpikesTo decodes a spikes message into dst, reusing its slices. On error
// dst holds no usable value.
func (d *Decoder) SpikesTo(dst *Spikes, data []byte) error {
	return done(d.spikes(dst, data))
}

func (d *Decoder) spikes(dst *Spikes, data []byte) *Error {
	s := &d.sc
	dst.Block, dst.Unit, dst.T = "", dst.Unit[:0], dst.T[:0]
	_, err := d.message(data, "spikes", spikeKeys, 2, func(k int) *Error {
		switch k {
		case 0:
			return s.array("unit", func() *Error {
				b, err := s.strField("unit")
				if err != nil {
					return err
				}
				id, known := d.intern[string(b)]
				if !known {
					// New to this decoder: checked here, once.
					id = string(b)
					if err := checkID(ReasonBadUnit, "unit", len(dst.Unit), id); err != nil {
						return err
					}
					id = d.id(b)
				}
				dst.Unit = append(dst.Unit, id)
				return nil
			})
		case 1:
			return s.floatsTo(&dst.T, "t")
		default:
			b, err := s.strField("block")
			if err != nil {
				return err
			}
			dst.Block = d.id(b)
			if dst.Block == "" {
				return &Error{Reason: ReasonBadBlock, Detail: "block: empty"}
			}
			return nil
		}
	})
	if err != nil {
		return err
	}
	return dst.checkDecoded()
}

var frameKeys = []string{"block", "index", "t"}

// FramesTo decodes a frames message into dst, reusing its slices. On error
// dst holds no usable value.
func (d *Decoder) FramesTo(dst *Frames, data []byte) error {
	return done(d.frames(dst, data))
}

func (d *Decoder) frames(dst *Frames, data []byte) *Error {
	s := &d.sc
	dst.Block, dst.Index, dst.T = "", dst.Index[:0], dst.T[:0]
	_, err := d.message(data, "frames", frameKeys, 3, func(k int) *Error {
		switch k {
		case 0:
			b, err := s.strField("block")
			if err != nil {
				return err
			}
			dst.Block = d.id(b)
			return nil
		case 1:
			return s.array("index", func() *Error {
				v, err := s.int("index")
				if err != nil {
					return err
				}
				dst.Index = append(dst.Index, v)
				return nil
			})
		default:
			return s.floatsTo(&dst.T, "t")
		}
	})
	if err != nil {
		return err
	}
	return dst.check()
}

var blockKeys = []string{"kind", "block", "t", "stimulus", "lags", "frame_period", "geometry"}
var geometryKeys = []string{"distance_cm", "pixel_size_cm"}

// Block decodes a block message.
func (d *Decoder) Block(data []byte) (Block, error) {
	var b Block
	if err := d.block(&b, data); err != nil {
		return Block{}, err
	}
	return b, nil
}

func (d *Decoder) block(dst *Block, data []byte) *Error {
	s := &d.sc
	have, err := d.message(data, "block", blockKeys, 3, func(k int) *Error {
		switch k {
		case 0:
			b, err := s.strField("kind")
			if err != nil {
				return err
			}
			dst.Kind = string(b)
		case 1:
			b, err := s.strField("block")
			if err != nil {
				return err
			}
			dst.Block = string(b)
		case 2:
			v, err := s.float("t")
			if err != nil {
				return err
			}
			dst.T = v
		case 3:
			if s.peek() != '{' {
				err := s.typeErr("stimulus", "object")
				if err.Reason == ReasonWrongType {
					err.Reason = ReasonBadStimulus
				}
				return err
			}
			at := s.pos
			if err := s.skip(1); err != nil {
				return err
			}
			dst.Stimulus = append([]byte(nil), s.data[at:s.pos]...)
		case 4:
			v, err := s.int("lags")
			if err != nil {
				return err
			}
			if v < 1 || v > MaxLags {
				return &Error{Reason: ReasonBadLags, Detail: "lags: " + strconv.FormatInt(v, 10) + " not in 1…" + strconv.Itoa(MaxLags)}
			}
			dst.Lags = int(v)
		case 5:
			v, err := s.float("frame_period")
			if err != nil {
				return err
			}
			if !(v > 0 && v <= MaxFramePeriod) {
				return &Error{Reason: ReasonBadFramePeriod, Detail: "frame_period: " + strconv.FormatFloat(v, 'g', -1, 64) + " s not in (0, 10]"}
			}
			dst.FramePeriod = v
		default:
			g := &Geometry{}
			var gh [2]bool
			err := s.object("geometry", geometryKeys, func(k int) *Error {
				gh[k] = true
				v, err := s.float(geometryKeys[k])
				if err != nil {
					return err
				}
				if k == 0 {
					g.DistanceCM = v
				} else {
					g.PixelSizeCM = v
				}
				return nil
			})
			if err != nil {
				return err
			}
			if !gh[0] || !gh[1] {
				return &Error{Reason: ReasonBadGeometry, Detail: "geometry: needs distance_cm and pixel_size_cm"}
			}
			dst.Geometry = g
		}
		return nil
	})
	if err != nil {
		return err
	}
	if dst.Kind == KindEnd {
		for i := 3; i < len(blockKeys); i++ {
			if have[i] {
				return &Error{Reason: ReasonUnexpectedField, Detail: blockKeys[i] + ": belongs to a start only"}
			}
		}
	}
	if dst.Kind == KindStart {
		if !have[4] {
			dst.Lags = DefaultLags
		}
		if !have[5] {
			dst.FramePeriod = DefaultFramePeriod
		}
	}
	return dst.check()
}

var controlKeys = []string{"command", "unit", "target", "fraction"}

// Control decodes a control message.
func (d *Decoder) Control(data []byte) (Control, error) {
	var c Control
	if err := d.control(&c, data); err != nil {
		return Control{}, err
	}
	return c, nil
}

func (d *Decoder) control(dst *Control, data []byte) *Error {
	s := &d.sc
	have, err := d.message(data, "control", controlKeys, 1, func(k int) *Error {
		switch k {
		case 0, 1:
			b, err := s.strField(controlKeys[k])
			if err != nil {
				return err
			}
			if k == 0 {
				dst.Command = string(b)
			} else {
				dst.Unit = string(b)
			}
		default:
			v, err := s.float(controlKeys[k])
			if err != nil {
				return err
			}
			if k == 2 {
				dst.Target = v
			} else {
				dst.Fraction = v
			}
		}
		return nil
	})
	if err != nil {
		return err
	}
	switch dst.Command {
	case CommandFlagSTC, CommandUnflagSTC:
		if !have[1] {
			return missing("unit")
		}
	case CommandCriterion:
		if !have[2] {
			return missing("target")
		}
		if !have[3] {
			return missing("fraction")
		}
	}
	if err := dst.check(); err != nil {
		return err
	}
	// Fields a command does not use must be absent, not merely zero.
	if (dst.Command != CommandFlagSTC && dst.Command != CommandUnflagSTC && have[1]) ||
		(dst.Command != CommandCriterion && (have[2] || have[3])) {
		return &Error{Reason: ReasonUnexpectedField, Detail: "a field not used by " + dst.Command}
	}
	return nil
}

// DecodeSpikes decodes a spikes message.
func DecodeSpikes(data []byte) (Spikes, error) {
	var d Decoder
	var s Spikes
	if err := d.spikes(&s, data); err != nil {
		return Spikes{}, err
	}
	return s, nil
}

// DecodeFrames decodes a frames message.
func DecodeFrames(data []byte) (Frames, error) {
	var d Decoder
	var f Frames
	if err := d.frames(&f, data); err != nil {
		return Frames{}, err
	}
	return f, nil
}

// DecodeBlock decodes a block start or end; a start gets the defaults of
// Lags and FramePeriod when the message omits them.
func DecodeBlock(data []byte) (Block, error) {
	var d Decoder
	return d.Block(data)
}

// DecodeControl decodes a control message.
func DecodeControl(data []byte) (Control, error) {
	var d Decoder
	return d.Control(data)
}
