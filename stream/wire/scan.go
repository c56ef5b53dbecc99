package wire

import (
	"encoding/binary"
	"math"
	"math/bits"
	"strconv"
	"strings"
	"unicode/utf16"
	"unicode/utf8"
	"unsafe"
)

// maxDepth bounds the nesting of the opaque stimulus object.
const maxDepth = 32

// scanner is a strict RFC 8259 reader over one message. It never allocates
// except where a decoded string must outlive the message.
type scanner struct {
	data []byte
	pos  int
	buf  []byte // scratch for strings with escapes
}

func (s *scanner) fail(reason, detail string) *Error {
	return &Error{Reason: reason, Detail: detail + " at byte " + strconv.Itoa(s.pos)}
}

func (s *scanner) ws() {
	for s.pos < len(s.data) {
		switch s.data[s.pos] {
		case ' ', '\t', '\n', '\r':
			s.pos++
		default:
			return
		}
	}
}

// peek returns the next non-space byte, or 0 at the end.
func (s *scanner) peek() byte {
	s.ws()
	if s.pos >= len(s.data) {
		return 0
	}
	return s.data[s.pos]
}

func (s *scanner) expect(c byte) *Error {
	if s.peek() != c {
		if s.pos >= len(s.data) {
			return s.fail(ReasonSyntax, "unexpected end of message, want '"+string(c)+"'")
		}
		return s.fail(ReasonSyntax, "want '"+string(c)+"'")
	}
	s.pos++
	return nil
}

// kindAt names the JSON type starting at the current position, for errors.
func (s *scanner) kindAt() string {
	switch s.peek() {
	case '{':
		return "object"
	case '[':
		return "array"
	case '"':
		return "string"
	case 't', 'f':
		return "boolean"
	case 'n':
		return "null"
	case 0:
		return "end of message"
	default:
		return "number"
	}
}

// typeErr reports a value of the wrong JSON type for field, after checking
// that the value is at least well-formed JSON (a syntax error wins).
func (s *scanner) typeErr(field, want string) *Error {
	got := s.kindAt()
	at := s.pos
	if err := s.skip(0); err != nil {
		return err
	}
	return &Error{Reason: ReasonWrongType, Detail: field + ": want " + want + ", got " + got + " at byte " + strconv.Itoa(at)}
}

// str reads a string and returns its bytes; the result aliases the message
// or the scanner's scratch and is valid until the next call.
func (s *scanner) str() ([]byte, *Error) {
	if s.peek() != '"' {
		return nil, s.fail(ReasonWrongType, "want string")
	}
	s.pos++
	start := s.pos
	ascii := true
	for s.pos < len(s.data) {
		c := s.data[s.pos]
		switch {
		case c == '"':
			b := s.data[start:s.pos]
			s.pos++
			if !ascii && !utf8.Valid(b) {
				return nil, s.fail(ReasonSyntax, "invalid UTF-8 in string")
			}
			return b, nil
		case c == '\\':
			return s.escaped(start)
		case c < 0x20:
			return nil, s.fail(ReasonSyntax, "control character in string")
		case c >= 0x80:
			ascii = false
		}
		s.pos++
	}
	return nil, s.fail(ReasonSyntax, "unterminated string")
}

// escaped finishes a string that contains escapes, decoding into s.buf.
func (s *scanner) escaped(start int) ([]byte, *Error) {
	s.buf = append(s.buf[:0], s.data[start:s.pos]...)
	for s.pos < len(s.data) {
		c := s.data[s.pos]
		switch {
		case c == '"':
			s.pos++
			if !utf8.Valid(s.buf) {
				return nil, s.fail(ReasonSyntax, "invalid UTF-8 in string")
			}
			return s.buf, nil
		case c < 0x20:
			return nil, s.fail(ReasonSyntax, "control character in string")
		case c != '\\':
			s.buf = append(s.buf, c)
			s.pos++
			continue
		}
		s.pos++
		if s.pos >= len(s.data) {
			break
		}
		e := s.data[s.pos]
		s.pos++
		switch e {
		case '"', '\\', '/':
			s.buf = append(s.buf, e)
		case 'b':
			s.buf = append(s.buf, '\b')
		case 'f':
			s.buf = append(s.buf, '\f')
		case 'n':
			s.buf = append(s.buf, '\n')
		case 'r':
			s.buf = append(s.buf, '\r')
		case 't':
			s.buf = append(s.buf, '\t')
		case 'u':
			r, ok := s.hex4()
			if !ok {
				return nil, s.fail(ReasonSyntax, "bad \\u escape")
			}
			if utf16.IsSurrogate(r) {
				// A surrogate must be the high half of a pair.
				if r >= 0xdc00 || s.pos+1 >= len(s.data) || s.data[s.pos] != '\\' || s.data[s.pos+1] != 'u' {
					return nil, s.fail(ReasonSyntax, "unpaired surrogate in string")
				}
				s.pos += 2
				r2, ok := s.hex4()
				if !ok {
					return nil, s.fail(ReasonSyntax, "bad \\u escape")
				}
				r = utf16.DecodeRune(r, r2)
				if r == utf8.RuneError {
					return nil, s.fail(ReasonSyntax, "unpaired surrogate in string")
				}
			}
			s.buf = utf8.AppendRune(s.buf, r)
		default:
			return nil, s.fail(ReasonSyntax, "bad escape in string")
		}
	}
	return nil, s.fail(ReasonSyntax, "unterminated string")
}

func (s *scanner) hex4() (rune, bool) {
	if s.pos+4 > len(s.data) {
		return 0, false
	}
	var r rune
	for _, c := range s.data[s.pos : s.pos+4] {
		switch {
		case '0' <= c && c <= '9':
			c -= '0'
		case 'a' <= c && c <= 'f':
			c = c - 'a' + 10
		case 'A' <= c && c <= 'F':
			c = c - 'A' + 10
		default:
			return 0, false
		}
		r = r<<4 | rune(c)
	}
	s.pos += 4
	return r, true
}

// number scans a JSON number and returns its text and whether it is an
// integer (no fraction, no exponent).
func (s *scanner) number() ([]byte, bool, *Error) {
	s.ws()
	start := s.pos
	d := s.data
	i := s.pos
	if i < len(d) && d[i] == '-' {
		i++
	}
	switch {
	case i < len(d) && d[i] == '0':
		i++
	case i < len(d) && '1' <= d[i] && d[i] <= '9':
		i = digits(d, i)
	default:
		s.pos = i
		return nil, false, s.fail(ReasonSyntax, "bad number")
	}
	integer := true
	if i < len(d) && d[i] == '.' {
		integer = false
		i++
		if j := digits(d, i); j == i {
			s.pos = i
			return nil, false, s.fail(ReasonSyntax, "bad number")
		} else {
			i = j
		}
	}
	if i < len(d) && (d[i] == 'e' || d[i] == 'E') {
		integer = false
		i++
		if i < len(d) && (d[i] == '+' || d[i] == '-') {
			i++
		}
		if j := digits(d, i); j == i {
			s.pos = i
			return nil, false, s.fail(ReasonSyntax, "bad number")
		} else {
			i = j
		}
	}
	s.pos = i
	return d[start:i], integer, nil
}

// digits returns the position after the decimal digits from i.
func digits(d []byte, i int) int {
	for i < len(d) && '0' <= d[i] && d[i] <= '9' {
		i++
	}
	return i
}

// numberOf scans a number value of field (want names the type for a
// wrong-type error) and returns its text, whether it is an integer, and
// its offset.
func (s *scanner) numberOf(field, want string) ([]byte, bool, int, *Error) {
	if c := s.peek(); c != '-' && (c < '0' || c > '9') {
		return nil, false, s.pos, s.typeErr(field, want)
	}
	at := s.pos
	b, integer, err := s.number()
	return b, integer, at, err
}

// float reads a finite number for field.
func (s *scanner) float(field string) (float64, *Error) {
	b, _, at, err := s.numberOf(field, "number")
	if err != nil {
		return 0, err
	}
	if v, ok := exactDecimal(b); ok {
		return v, nil
	}
	// The text is a valid JSON number, which ParseFloat reads exactly as
	// encoding/json does; the string view does not outlive this call.
	v, perr := strconv.ParseFloat(unsafe.String(unsafe.SliceData(b), len(b)), 64)
	if perr != nil || math.IsInf(v, 0) {
		return 0, &Error{Reason: ReasonNonFinite, Detail: field + ": number out of range at byte " + strconv.Itoa(at)}
	}
	return v, nil
}

// exactPow10 holds the powers of ten that a float64 represents exactly.
var exactPow10 = [...]float64{1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10,
	1e11, 1e12, 1e13, 1e14, 1e15, 1e16, 1e17, 1e18, 1e19, 1e20, 1e21, 1e22}

// exactDecimal reads the valid JSON number b when it is a plain decimal
// (no exponent) of at most 19 significant digits, as spike times and frame
// times are, and returns strconv.ParseFloat's result for it: the correctly
// rounded value, ties to even. Other numbers report false.
//
// The digits, read as an integer m < 10¹⁹, and f fraction digits give
// x = m/10^f. When m < 2⁵³ and f ≤ 22, m and 10^f are both exact and the one
// division is rounded correctly (the fast path of W. D. Clinger, "How to
// read floating point numbers accurately", PLDI 1990). Times of 16 and 17
// significant digits (the shortest form of most float64 times) often have
// m ≥ 2⁵³: for them, when f ≤ 19, the division gives a value within an ulp
// or two of x, which nearestDouble corrects by exact integer comparisons.
func exactDecimal(b []byte) (float64, bool) {
	i, neg := 0, false
	if len(b) > 0 && b[0] == '-' {
		i, neg = 1, true
	}
	var m uint64
	nd, frac := 0, 0 // nd: significant digits (leading zeros not counted)
	for ; i < len(b) && '0' <= b[i] && b[i] <= '9'; i++ {
		m = m*10 + uint64(b[i]-'0') // JSON: at most "0" before other digits
		if m != 0 {
			nd++
		}
	}
	if i < len(b) && b[i] == '.' {
		i++
		if m == 0 {
			// Zeros before the first significant digit add nothing to m.
			for ; i < len(b) && b[i] == '0'; i++ {
				frac++
			}
		}
		// Eight digits at a time while they last, then one at a time.
		for ; len(b)-i >= 8; i += 8 {
			w := binary.LittleEndian.Uint64(b[i:])
			if !eightDigits(w) {
				break
			}
			if nd += 8; nd > 19 {
				return 0, false // m would pass 2⁶⁴
			}
			m = m*1e8 + eightDigitsValue(w)
			frac += 8
		}
		for ; i < len(b) && '0' <= b[i] && b[i] <= '9'; i++ {
			if nd == 19 {
				return 0, false
			}
			m = m*10 + uint64(b[i]-'0')
			nd++
			frac++
		}
	}
	if i != len(b) {
		return 0, false // an exponent
	}
	var v float64
	switch {
	case m <= 1<<53 && frac < len(exactPow10):
		v = float64(m) / exactPow10[frac]
	case frac < len(exactPow10Int):
		var ok bool
		if v, ok = nearestDouble(m, frac); !ok {
			return 0, false
		}
	default:
		return 0, false
	}
	if neg {
		v = -v
	}
	return v, true
}

// eightDigits reports whether the eight bytes of w (little-endian) are
// ASCII digits: each byte's high nibble is 3, and adding 6 leaves it 3
// (common practice, no source: the bytewise range check of SWAR parsing).
func eightDigits(w uint64) bool {
	return w&0xF0F0F0F0F0F0F0F0|(w+0x0606060606060606)&0xF0F0F0F0F0F0F0F0>>4 == 0x3333333333333333
}

// eightDigitsValue is the number written by the eight ASCII digits of w,
// the first digit in the lowest byte: adjacent digits combine into pairs
// (10·d₀ + d₁ in every other byte), the pairs into one value by two
// multiplications whose upper halves carry the place values (the SWAR
// method of D. Lemire's "Fast number parsing", common practice; from
// memory).
func eightDigitsValue(w uint64) uint64 {
	w -= 0x3030303030303030
	w = w*10 + w>>8
	const mask = 0x000000FF000000FF
	return ((w&mask)*(100+1000000<<32) + (w>>16&mask)*(1+10000<<32)) >> 32
}

// exactPow10Int holds the powers of ten below 2⁶⁴.
var exactPow10Int = [...]uint64{1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10,
	1e11, 1e12, 1e13, 1e14, 1e15, 1e16, 1e17, 1e18, 1e19}

// nearestDouble returns the float64 nearest to x = m/10^f (ties to the even
// significand), for 2⁵³ < m < 2⁶⁴ and f ≤ 19, or false when the exact
// comparisons would need more than 128 bits (x ≥ 2⁵³, or m·2^s too wide).
// It starts from the rounded division and moves to a neighbour while x lies
// beyond the midpoint between the two: a midpoint (2K+1)·2^E of the doubles
// K·2^(E+1) and (K+1)·2^(E+1), E < 0, is compared with x as the integers
// m·2^(−E) and (2K+1)·10^f.
func nearestDouble(m uint64, f int) (float64, bool) {
	p := exactPow10Int[f]
	q := float64(m) / float64(p) // within two ulps of x
	// above reports whether x is above (+1), at (0) or below (−1) the
	// midpoint between lower and its successor.
	above := func(lower float64) (int, bool) {
		bits64 := math.Float64bits(lower)
		exp := int(bits64 >> 52 & 0x7ff)
		if exp == 0 || exp == 0x7ff {
			return 0, false // subnormal, infinite or NaN: not here
		}
		k := bits64&(1<<52-1) | 1<<52
		e := exp - 1075 - 1 // midpoint = (2k+1)·2^e
		if e >= 0 || bits.Len64(m)-e > 127 {
			return 0, false
		}
		xh, xl := shiftLeft128(m, -e)
		mh, ml := bits.Mul64(2*k+1, p)
		switch {
		case xh > mh || xh == mh && xl > ml:
			return 1, true
		case xh == mh && xl == ml:
			return 0, true
		}
		return -1, true
	}
	for range 4 {
		up, ok := above(q)
		if !ok {
			return 0, false
		}
		next := math.Nextafter(q, math.Inf(1))
		switch {
		case up > 0:
			q = next
			continue
		case up == 0:
			return evenOf(q, next), true
		}
		prev := math.Nextafter(q, 0)
		down, ok := above(prev)
		if !ok {
			return 0, false
		}
		switch {
		case down < 0:
			q = prev
			continue
		case down == 0:
			return evenOf(prev, q), true
		}
		return q, true
	}
	return 0, false // not reached: the division is off by two ulps at most
}

// shiftLeft128 returns m·2^s as a 128-bit integer (high, low), s < 128.
func shiftLeft128(m uint64, s int) (hi, lo uint64) {
	switch {
	case s == 0:
		return 0, m
	case s < 64:
		return m >> (64 - s), m << s
	}
	return m << (s - 64), 0
}

// evenOf returns whichever of two neighbouring doubles has an even
// significand.
func evenOf(a, b float64) float64 {
	if math.Float64bits(a)&1 == 0 {
		return a
	}
	return b
}

// int reads an integer for field.
func (s *scanner) int(field string) (int64, *Error) {
	b, integer, at, err := s.numberOf(field, "integer")
	if err != nil {
		return 0, err
	}
	if !integer {
		return 0, &Error{Reason: ReasonWrongType, Detail: field + ": want integer at byte " + strconv.Itoa(at)}
	}
	v, perr := strconv.ParseInt(unsafe.String(unsafe.SliceData(b), len(b)), 10, 64)
	if perr != nil {
		return 0, &Error{Reason: ReasonWrongType, Detail: field + ": integer out of range at byte " + strconv.Itoa(at)}
	}
	return v, nil
}

// literal consumes one of true, false, null.
func (s *scanner) literal() *Error {
	for _, w := range [...]string{"true", "false", "null"} {
		if len(s.data)-s.pos >= len(w) && string(s.data[s.pos:s.pos+len(w)]) == w {
			s.pos += len(w)
			return nil
		}
	}
	return s.fail(ReasonSyntax, "invalid value")
}

// more consumes the separator after a member or element: true after ',',
// false after the closing byte.
func (s *scanner) more(closing byte) (bool, *Error) {
	switch s.peek() {
	case ',':
		s.pos++
		return true, nil
	case closing:
		s.pos++
		return false, nil
	case 0:
		return false, s.fail(ReasonSyntax, "unexpected end of message")
	default:
		return false, s.fail(ReasonSyntax, "want ',' or '"+string(closing)+"'")
	}
}

// empty consumes the opening byte of an object or array, and its closing
// byte too when nothing but white space comes between.
func (s *scanner) empty(closing byte) bool {
	s.pos++
	if s.peek() == closing {
		s.pos++
		return true
	}
	return false
}

// skip checks and consumes any JSON value.
func (s *scanner) skip(depth int) *Error {
	if depth > maxDepth {
		return s.fail(ReasonTooDeep, "nesting deeper than "+strconv.Itoa(maxDepth))
	}
	switch c := s.peek(); c {
	case '{':
		if s.empty('}') {
			return nil
		}
		for {
			if _, err := s.str(); err != nil {
				if err.Reason == ReasonWrongType {
					err.Reason = ReasonSyntax
				}
				return err
			}
			if err := s.expect(':'); err != nil {
				return err
			}
			if err := s.skip(depth + 1); err != nil {
				return err
			}
			if more, err := s.more('}'); !more {
				return err
			}
		}
	case '[':
		if s.empty(']') {
			return nil
		}
		for {
			if err := s.skip(depth + 1); err != nil {
				return err
			}
			if more, err := s.more(']'); !more {
				return err
			}
		}
	case '"':
		_, err := s.str()
		return err
	case 't', 'f', 'n':
		return s.literal()
	case 0:
		return s.fail(ReasonSyntax, "unexpected end of message")
	default:
		_, _, err := s.number()
		return err
	}
}

// object walks the members of an object, calling member with each decoded
// key (valid only during the call) positioned at its value. member must
// consume the value. keys lists the known keys: a repeated known key is a
// duplicate, and an unknown key that equals a known one up to case is
// rejected, since encoding/json would read it as that field.
func (s *scanner) object(what string, keys []string, member func(k int) *Error) *Error {
	if s.peek() != '{' {
		return s.typeErr(what, "object")
	}
	var seen uint32
	if s.empty('}') {
		return nil
	}
	for {
		if s.peek() != '"' {
			return s.fail(ReasonSyntax, "want object key")
		}
		at := s.pos
		key, err := s.str()
		if err != nil {
			return err
		}
		k := -1
		for i, name := range keys {
			if string(key) == name {
				k = i
				break
			}
		}
		if k < 0 {
			for _, name := range keys {
				if strings.EqualFold(string(key), name) {
					return &Error{Reason: ReasonCaseKey, Detail: what + ": key " + strconv.Quote(string(key)) + " differs from " + strconv.Quote(name) + " only in case at byte " + strconv.Itoa(at)}
				}
			}
		} else {
			if seen&(1<<k) != 0 {
				return &Error{Reason: ReasonDuplicateKey, Detail: what + ": key " + strconv.Quote(keys[k]) + " repeated at byte " + strconv.Itoa(at)}
			}
			seen |= 1 << k
		}
		if err := s.expect(':'); err != nil {
			return err
		}
		if k < 0 {
			if err := s.skip(1); err != nil {
				return err
			}
		} else if err := member(k); err != nil {
			return err
		}
		if more, err := s.more('}'); !more {
			return err
		}
	}
}

// array walks the elements of an array, calling elem positioned at each.
func (s *scanner) array(field string, elem func() *Error) *Error {
	if s.peek() != '[' {
		return s.typeErr(field, "array")
	}
	if s.empty(']') {
		return nil
	}
	for {
		if err := elem(); err != nil {
			return err
		}
		if more, err := s.more(']'); !more {
			return err
		}
	}
}

// end checks that nothing but white space follows the top-level value.
func (s *scanner) end() *Error {
	s.ws()
	if s.pos != len(s.data) {
		return s.fail(ReasonTrailing, "data after the message")
	}
	return nil
}
