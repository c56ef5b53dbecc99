package npy

import (
	"bytes"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"math"
	"strconv"
)

// Limits applied to every file read.
const (
	// MaxHeader bounds the header length in bytes (numpy itself writes far
	// smaller headers).
	MaxHeader = 1 << 16
	// MaxDims bounds the number of dimensions.
	MaxDims = 32
	// DefaultMaxData is the data limit used by Read: 2 GiB.
	DefaultMaxData = 1 << 31
)

var magic = []byte("\x93NUMPY")

// Array is one NPY array as stored.
type Array struct {
	// Shape is the size of each dimension; an empty shape is a scalar.
	Shape []int
	// Descr is the numpy dtype string, e.g. "<f8", "<f4", "|u1".
	Descr string
	// Fortran reports column-major (Fortran) element order.
	Fortran bool
	// Data holds the raw element bytes in file order.
	Data []byte

	kind byte // 'f', 'u', 'i' or 'b'
	size int  // bytes per element
	big  bool // big-endian elements
}

// Len is the number of elements.
func (a *Array) Len() int {
	if a.size == 0 {
		return 0
	}
	return len(a.Data) / a.size
}

// ItemSize is the number of bytes per element.
func (a *Array) ItemSize() int { return a.size }

// Read reads one array from r with the default data limit.
func Read(r io.Reader) (*Array, error) { return ReadLimit(r, DefaultMaxData) }

// ReadLimit reads one array from r, refusing arrays whose data would exceed
// maxData bytes.
func ReadLimit(r io.Reader, maxData int64) (*Array, error) {
	var pre [8]byte
	if _, err := io.ReadFull(r, pre[:]); err != nil {
		return nil, fmt.Errorf("npy: reading preamble: %w", noEOF(err))
	}
	if !bytes.Equal(pre[:6], magic) {
		return nil, errors.New("npy: not an NPY file (bad magic string)")
	}
	major, minor := pre[6], pre[7]
	var hlen int
	switch major {
	case 1:
		var b [2]byte
		if _, err := io.ReadFull(r, b[:]); err != nil {
			return nil, fmt.Errorf("npy: reading header length: %w", noEOF(err))
		}
		hlen = int(binary.LittleEndian.Uint16(b[:]))
	case 2, 3:
		var b [4]byte
		if _, err := io.ReadFull(r, b[:]); err != nil {
			return nil, fmt.Errorf("npy: reading header length: %w", noEOF(err))
		}
		n := binary.LittleEndian.Uint32(b[:])
		if n > MaxHeader {
			return nil, fmt.Errorf("npy: header length %d exceeds limit %d", n, MaxHeader)
		}
		hlen = int(n)
	default:
		return nil, fmt.Errorf("npy: unsupported format version %d.%d", major, minor)
	}
	hdr := make([]byte, hlen)
	if _, err := io.ReadFull(r, hdr); err != nil {
		return nil, fmt.Errorf("npy: reading %d-byte header: %w", hlen, noEOF(err))
	}
	a, err := parseHeader(hdr)
	if err != nil {
		return nil, err
	}
	n := int64(a.size)
	for _, d := range a.Shape {
		if d != 0 && n > maxData/int64(d) {
			return nil, fmt.Errorf("npy: shape %v of %s exceeds the %d-byte data limit", a.Shape, a.Descr, maxData)
		}
		n *= int64(d)
	}
	if n > maxData {
		return nil, fmt.Errorf("npy: shape %v of %s exceeds the %d-byte data limit", a.Shape, a.Descr, maxData)
	}
	// Read incrementally: memory follows the bytes present, not the claim.
	var buf bytes.Buffer
	got, err := buf.ReadFrom(io.LimitReader(r, n))
	if err != nil {
		return nil, fmt.Errorf("npy: reading data: %w", err)
	}
	if got != n {
		return nil, fmt.Errorf("npy: data truncated: shape %v of %s needs %d bytes, file has %d", a.Shape, a.Descr, n, got)
	}
	a.Data = buf.Bytes()
	return a, nil
}

func noEOF(err error) error {
	if err == io.EOF {
		return io.ErrUnexpectedEOF
	}
	return err
}

// parseHeader parses the Python dict literal of an NPY header.
func parseHeader(h []byte) (*Array, error) {
	p := &parser{s: h}
	p.space()
	if !p.eat('{') {
		return nil, p.errorf("header does not start with '{'")
	}
	a := &Array{}
	var seen [3]bool
	for {
		p.space()
		if p.eat('}') {
			break
		}
		key, err := p.str()
		if err != nil {
			return nil, err
		}
		p.space()
		if !p.eat(':') {
			return nil, p.errorf("expected ':' after key %q", key)
		}
		p.space()
		switch key {
		case "descr":
			if p.peek() == '[' {
				return nil, errors.New("npy: structured dtypes are not supported")
			}
			if a.Descr, err = p.str(); err != nil {
				return nil, err
			}
			seen[0] = true
		case "fortran_order":
			if a.Fortran, err = p.boolean(); err != nil {
				return nil, err
			}
			seen[1] = true
		case "shape":
			if a.Shape, err = p.tuple(); err != nil {
				return nil, err
			}
			seen[2] = true
		default:
			return nil, p.errorf("unexpected header key %q", key)
		}
		p.space()
		if p.eat(',') {
			continue
		}
		p.space()
		if !p.eat('}') {
			return nil, p.errorf("expected ',' or '}'")
		}
		break
	}
	if !seen[0] || !seen[1] || !seen[2] {
		return nil, errors.New("npy: header lacks one of 'descr', 'fortran_order', 'shape'")
	}
	if err := a.setDtype(); err != nil {
		return nil, err
	}
	return a, nil
}

func (a *Array) setDtype() error {
	d := a.Descr
	if len(d) < 3 {
		return fmt.Errorf("npy: unsupported dtype %q", d)
	}
	order, kind := d[0], d[1]
	size, err := strconv.Atoi(d[2:])
	if err != nil {
		return fmt.Errorf("npy: unsupported dtype %q", d)
	}
	switch kind {
	case 'f':
		if size != 2 && size != 4 && size != 8 {
			return fmt.Errorf("npy: unsupported dtype %q", d)
		}
	case 'u', 'i':
		if size != 1 && size != 2 && size != 4 && size != 8 {
			return fmt.Errorf("npy: unsupported dtype %q", d)
		}
	case 'b':
		if size != 1 {
			return fmt.Errorf("npy: unsupported dtype %q", d)
		}
	default:
		return fmt.Errorf("npy: unsupported dtype %q (only bool, integer and float scalars)", d)
	}
	switch order {
	case '<', '|':
	case '>':
		a.big = true
	case '=':
		// Native order: this package runs on little-endian hosts only
		// in practice; numpy itself never writes '='.
	default:
		return fmt.Errorf("npy: unsupported byte order in dtype %q", d)
	}
	a.kind, a.size = kind, size
	return nil
}

type parser struct {
	s []byte
	i int
}

func (p *parser) errorf(format string, args ...any) error {
	return fmt.Errorf("npy: header offset %d: %s", p.i, fmt.Sprintf(format, args...))
}

func (p *parser) space() {
	for p.i < len(p.s) && (p.s[p.i] == ' ' || p.s[p.i] == '\n' || p.s[p.i] == '\t' || p.s[p.i] == '\r') {
		p.i++
	}
}

func (p *parser) peek() byte {
	if p.i < len(p.s) {
		return p.s[p.i]
	}
	return 0
}

func (p *parser) eat(c byte) bool {
	if p.peek() == c && p.i < len(p.s) {
		p.i++
		return true
	}
	return false
}

func (p *parser) str() (string, error) {
	q := p.peek()
	if q != '\'' && q != '"' {
		return "", p.errorf("expected a string")
	}
	p.i++
	start := p.i
	for p.i < len(p.s) && p.s[p.i] != q {
		if p.s[p.i] == '\\' {
			return "", p.errorf("escapes in strings are not supported")
		}
		p.i++
	}
	if p.i >= len(p.s) {
		return "", p.errorf("unterminated string")
	}
	v := string(p.s[start:p.i])
	p.i++
	return v, nil
}

func (p *parser) boolean() (bool, error) {
	switch {
	case bytes.HasPrefix(p.s[p.i:], []byte("True")):
		p.i += 4
		return true, nil
	case bytes.HasPrefix(p.s[p.i:], []byte("False")):
		p.i += 5
		return false, nil
	}
	return false, p.errorf("expected True or False")
}

func (p *parser) tuple() ([]int, error) {
	if !p.eat('(') {
		return nil, p.errorf("expected '(' for shape")
	}
	shape := []int{}
	for {
		p.space()
		if p.eat(')') {
			return shape, nil
		}
		start := p.i
		for p.i < len(p.s) && p.s[p.i] >= '0' && p.s[p.i] <= '9' {
			p.i++
		}
		if p.i == start {
			return nil, p.errorf("expected a non-negative integer in shape")
		}
		if p.i-start > 12 {
			return nil, p.errorf("shape dimension too large")
		}
		d, _ := strconv.Atoi(string(p.s[start:p.i]))
		if len(shape) == MaxDims {
			return nil, p.errorf("more than %d dimensions", MaxDims)
		}
		shape = append(shape, d)
		p.space()
		if p.eat(',') {
			continue
		}
		p.space()
		if !p.eat(')') {
			return nil, p.errorf("expected ',' or ')' in shape")
		}
		return shape, nil
	}
}

// Float64To converts elements [off, off+len(dst)) to float64 into dst.
// Integers convert exactly (up to 2^53), float16 is not supported.
func (a *Array) Float64To(dst []float64, off int) error {
	if off < 0 || off > a.Len() || len(dst) > a.Len()-off {
		return fmt.Errorf("npy: elements [%d, %d) outside array of %d", off, off+len(dst), a.Len())
	}
	s, b := a.size, a.Data[off*a.size:]
	var bo binary.ByteOrder = binary.LittleEndian
	if a.big {
		bo = binary.BigEndian
	}
	switch {
	case a.kind == 'f' && s == 8:
		for i := range dst {
			dst[i] = math.Float64frombits(bo.Uint64(b[8*i:]))
		}
	case a.kind == 'f' && s == 4:
		for i := range dst {
			dst[i] = float64(math.Float32frombits(bo.Uint32(b[4*i:])))
		}
	case (a.kind == 'u' || a.kind == 'b') && s == 1:
		for i := range dst {
			dst[i] = float64(b[i])
		}
	case a.kind == 'i' && s == 1:
		for i := range dst {
			dst[i] = float64(int8(b[i]))
		}
	case a.kind == 'u' && s == 2:
		for i := range dst {
			dst[i] = float64(bo.Uint16(b[2*i:]))
		}
	case a.kind == 'i' && s == 2:
		for i := range dst {
			dst[i] = float64(int16(bo.Uint16(b[2*i:])))
		}
	case a.kind == 'u' && s == 4:
		for i := range dst {
			dst[i] = float64(bo.Uint32(b[4*i:]))
		}
	case a.kind == 'i' && s == 4:
		for i := range dst {
			dst[i] = float64(int32(bo.Uint32(b[4*i:])))
		}
	case a.kind == 'u' && s == 8:
		for i := range dst {
			dst[i] = float64(bo.Uint64(b[8*i:]))
		}
	case a.kind == 'i' && s == 8:
		for i := range dst {
			dst[i] = float64(int64(bo.Uint64(b[8*i:])))
		}
	default:
		return fmt.Errorf("npy: cannot convert dtype %q to float64", a.Descr)
	}
	return nil
}

// Write writes data as a C-order little-endian float64 ('<f8') array of
// the given shape. len(data) must equal the product of shape.
func Write(w io.Writer, shape []int, data []float64) error {
	return write(w, "<f8", shape, data, func(b []byte, v float64) []byte {
		return binary.LittleEndian.AppendUint64(b, math.Float64bits(v))
	})
}

// Write32 writes data as a C-order little-endian float32 ('<f4') array.
func Write32(w io.Writer, shape []int, data []float32) error {
	return write(w, "<f4", shape, data, func(b []byte, v float32) []byte {
		return binary.LittleEndian.AppendUint32(b, math.Float32bits(v))
	})
}

func write[T any](w io.Writer, descr string, shape []int, data []T, put func([]byte, T) []byte) error {
	if err := writeHeader(w, descr, shape, len(data)); err != nil {
		return err
	}
	buf := make([]byte, 0, 4096)
	for i, v := range data {
		buf = put(buf, v)
		if len(buf) >= 4088 || i == len(data)-1 {
			if _, err := w.Write(buf); err != nil {
				return fmt.Errorf("npy: %w", err)
			}
			buf = buf[:0]
		}
	}
	return nil
}

func writeHeader(w io.Writer, descr string, shape []int, n int) error {
	if len(shape) > MaxDims {
		return fmt.Errorf("npy: %d dimensions exceed the limit %d", len(shape), MaxDims)
	}
	want := 1
	var sb bytes.Buffer
	fmt.Fprintf(&sb, "{'descr': '%s', 'fortran_order': False, 'shape': (", descr)
	for i, d := range shape {
		if d < 0 {
			return fmt.Errorf("npy: negative dimension %d in shape %v", d, shape)
		}
		if d != 0 && want > math.MaxInt/d {
			return fmt.Errorf("npy: shape %v overflows", shape)
		}
		want *= d
		if i > 0 {
			sb.WriteString(", ")
		}
		sb.WriteString(strconv.Itoa(d))
	}
	if len(shape) == 1 {
		sb.WriteByte(',')
	}
	sb.WriteString("), }")
	if want != n {
		return fmt.Errorf("npy: shape %v holds %d elements, data has %d", shape, want, n)
	}
	// Pad with spaces so that magic+version+length+header is a multiple
	// of 64, ending in '\n' (the format's alignment rule).
	total := len(magic) + 2 + 2 + sb.Len() + 1
	pad := (64 - total%64) % 64
	sb.Write(bytes.Repeat([]byte{' '}, pad))
	sb.WriteByte('\n')
	if sb.Len() > math.MaxUint16 {
		return fmt.Errorf("npy: header too long")
	}
	out := make([]byte, 0, 10+sb.Len())
	out = append(out, magic...)
	out = append(out, 1, 0)
	out = binary.LittleEndian.AppendUint16(out, uint16(sb.Len()))
	out = append(out, sb.Bytes()...)
	if _, err := w.Write(out); err != nil {
		return fmt.Errorf("npy: %w", err)
	}
	return nil
}
