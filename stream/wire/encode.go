package wire

import "strconv"

// The Append functions check a value as the decoder would and append its
// encoding to dst; on error dst is returned unchanged. The Encode functions
// return a new slice. Floats are written in the shortest form that reads
// back exactly.

// AppendSpikes appends the encoding of s to dst.
func AppendSpikes(dst []byte, s *Spikes) ([]byte, error) {
	if err := s.check(); err != nil {
		return dst, err
	}
	b := append(dst, `{"unit":[`...)
	for i, u := range s.Unit {
		if i > 0 {
			b = append(b, ',')
		}
		b = appendString(b, u)
	}
	b = append(b, `],"t":`...)
	b = appendFloats(b, s.T)
	if s.Block != "" {
		b = append(b, `,"block":`...)
		b = appendString(b, s.Block)
	}
	return append(b, '}'), nil
}

// AppendFrames appends the encoding of f to dst.
func AppendFrames(dst []byte, f *Frames) ([]byte, error) {
	if err := f.check(); err != nil {
		return dst, err
	}
	b := append(dst, `{"block":`...)
	b = appendString(b, f.Block)
	b = append(b, `,"index":[`...)
	for i, x := range f.Index {
		if i > 0 {
			b = append(b, ',')
		}
		b = strconv.AppendInt(b, x, 10)
	}
	b = append(b, `],"t":`...)
	b = appendFloats(b, f.T)
	return append(b, '}'), nil
}

// AppendBlock appends the encoding of m to dst. A start always carries
// lags and frame_period; zero values there are filled with the defaults.
func AppendBlock(dst []byte, m *Block) ([]byte, error) {
	v := *m
	if v.Kind == KindStart {
		if v.Lags == 0 {
			v.Lags = DefaultLags
		}
		if v.FramePeriod == 0 {
			v.FramePeriod = DefaultFramePeriod
		}
	}
	if err := v.check(); err != nil {
		return dst, err
	}
	b := append(dst, `{"kind":`...)
	b = appendString(b, v.Kind)
	b = append(b, `,"block":`...)
	b = appendString(b, v.Block)
	b = append(b, `,"t":`...)
	b = appendFloat(b, v.T)
	if v.Kind == KindStart {
		b = append(b, `,"stimulus":`...)
		b = append(b, v.Stimulus...)
		b = append(b, `,"lags":`...)
		b = strconv.AppendInt(b, int64(v.Lags), 10)
		b = append(b, `,"frame_period":`...)
		b = appendFloat(b, v.FramePeriod)
		if g := v.Geometry; g != nil {
			b = append(b, `,"geometry":{"distance_cm":`...)
			b = appendFloat(b, g.DistanceCM)
			b = append(b, `,"pixel_size_cm":`...)
			b = appendFloat(b, g.PixelSizeCM)
			b = append(b, '}')
		}
	}
	return append(b, '}'), nil
}

// AppendControl appends the encoding of c to dst.
func AppendControl(dst []byte, c *Control) ([]byte, error) {
	if err := c.check(); err != nil {
		return dst, err
	}
	b := append(dst, `{"command":`...)
	b = appendString(b, c.Command)
	if c.Unit != "" {
		b = append(b, `,"unit":`...)
		b = appendString(b, c.Unit)
	}
	if c.Command == CommandCriterion {
		b = append(b, `,"target":`...)
		b = appendFloat(b, c.Target)
		b = append(b, `,"fraction":`...)
		b = appendFloat(b, c.Fraction)
	}
	return append(b, '}'), nil
}

// EncodeSpikes returns the encoding of s.
func EncodeSpikes(s Spikes) ([]byte, error) { return AppendSpikes(nil, &s) }

// EncodeFrames returns the encoding of f.
func EncodeFrames(f Frames) ([]byte, error) { return AppendFrames(nil, &f) }

// EncodeBlock returns the encoding of m.
func EncodeBlock(m Block) ([]byte, error) { return AppendBlock(nil, &m) }

// EncodeControl returns the encoding of c.
func EncodeControl(c Control) ([]byte, error) { return AppendControl(nil, &c) }

func appendFloat(b []byte, v float64) []byte {
	return strconv.AppendFloat(b, v, 'g', -1, 64)
}

func appendFloats(b []byte, v []float64) []byte {
	b = append(b, '[')
	for i, x := range v {
		if i > 0 {
			b = append(b, ',')
		}
		b = appendFloat(b, x)
	}
	return append(b, ']')
}

const hexDigits = "0123456789abcdef"

// appendString writes s as a JSON string; s must be valid UTF-8 (checked
// by the callers' checks).
func appendString(b []byte, s string) []byte {
	b = append(b, '"')
	start := 0
	for i := 0; i < len(s); i++ {
		c := s[i]
		if c >= 0x20 && c != '"' && c != '\\' {
			continue
		}
		b = append(b, s[start:i]...)
		switch c {
		case '"', '\\':
			b = append(b, '\\', c)
		case '\n':
			b = append(b, '\\', 'n')
		case '\r':
			b = append(b, '\\', 'r')
		case '\t':
			b = append(b, '\\', 't')
		default:
			b = append(b, '\\', 'u', '0', '0', hexDigits[c>>4], hexDigits[c&0xf])
		}
		start = i + 1
	}
	b = append(b, s[start:]...)
	return append(b, '"')
}
