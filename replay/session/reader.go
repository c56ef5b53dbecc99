package session

import (
	"bufio"
	"bytes"
	"encoding/binary"
	"encoding/json"
	"errors"
	"fmt"
	"hash/crc32"
	"io"
	"os"
	"slices"
	"time"
)

// readChunk is the step in which a record body is read, so that a length
// field larger than the bytes actually present costs no more memory than
// those bytes.
const readChunk = 64 << 10

// Reader reads a session file record by record. It belongs to one
// goroutine.
type Reader struct {
	src  *bufio.Reader
	pend []byte // bytes given back after damage, read before src
	off  int64  // file offset of the next unread byte
	hdr  Header
	buf  []byte // the current record, reused
	eof  bool
}

// NewReader reads the magic line and the header from src.
func NewReader(src io.Reader) (*Reader, error) {
	r := &Reader{src: bufio.NewReaderSize(src, readChunk)}
	magic := make([]byte, len(Magic))
	if n, err := io.ReadFull(r.src, magic); err != nil || string(magic) != Magic {
		if err != nil && n == 0 {
			return nil, errors.New("session: empty file, not a session")
		}
		return nil, errors.New("session: not a session file (the first line is not \"livefield session 1\")")
	}
	r.off = int64(len(Magic))
	line, err := r.src.ReadSlice('\n')
	if err != nil {
		if errors.Is(err, bufio.ErrBufferFull) || len(line) >= MaxHeader {
			return nil, fmt.Errorf("session: header line longer than %d bytes", MaxHeader)
		}
		return nil, fmt.Errorf("session: header line at byte %d: %w", r.off, io.ErrUnexpectedEOF)
	}
	if len(line) > MaxHeader {
		return nil, fmt.Errorf("session: header line of %d bytes is longer than %d", len(line), MaxHeader)
	}
	dec := json.NewDecoder(bytes.NewReader(line))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&r.hdr); err != nil {
		return nil, fmt.Errorf("session: header at byte %d: %w", r.off, err)
	}
	if dec.More() {
		return nil, fmt.Errorf("session: header at byte %d: data after the JSON object", r.off)
	}
	r.off += int64(len(line))
	return r, nil
}

// Header is the recording's header.
func (r *Reader) Header() Header { return r.hdr }

// Offset is the byte offset of the next record the reader will look at.
func (r *Reader) Offset() int64 { return r.off }

// read fills p from the pushed-back bytes, then from the file. It returns
// the bytes read and io.EOF or io.ErrUnexpectedEOF when the file ends first.
func (r *Reader) read(p []byte) (int, error) {
	n := copy(p, r.pend)
	r.pend = r.pend[n:]
	if n < len(p) {
		m, err := io.ReadFull(r.src, p[n:])
		n += m
		if err != nil {
			r.off += int64(n)
			if n == 0 {
				return 0, io.EOF
			}
			return n, io.ErrUnexpectedEOF
		}
	}
	r.off += int64(n)
	return n, nil
}

func (r *Reader) readByte() (byte, error) {
	if len(r.pend) > 0 {
		c := r.pend[0]
		r.pend = r.pend[1:]
		r.off++
		return c, nil
	}
	c, err := r.src.ReadByte()
	if err != nil {
		return 0, io.EOF
	}
	r.off++
	return c, nil
}

// unread gives b back to be read again.
func (r *Reader) unread(b []byte) {
	if len(b) == 0 {
		return
	}
	p := make([]byte, 0, len(b)+len(r.pend))
	p = append(p, b...)
	r.pend = append(p, r.pend...)
	r.off -= int64(len(b))
}

// resync is called after a bad record starting at start whose bytes read so
// far are got: it gives back all of them but the first and scans for the
// next marker, leaving the reader just before it. It reports whether a
// marker was found.
func (r *Reader) resync(got []byte) bool {
	if len(got) > 1 {
		r.unread(got[1:])
	}
	var win [markerLen]byte
	have := 0
	for {
		c, err := r.readByte()
		if err != nil {
			return false
		}
		if have < markerLen {
			win[have] = c
			have++
		} else {
			copy(win[:], win[1:])
			win[markerLen-1] = c
		}
		if have == markerLen && win == marker {
			r.unread(win[:])
			return true
		}
	}
}

// Next returns the next record. Its Data stays valid until the next call
// (use Record.Clone to keep it). At the end it returns io.EOF. Damage is
// returned as a *CorruptError after the reader has skipped it, so the
// caller may report it and call Next again.
func (r *Reader) Next() (Record, error) {
	if r.eof {
		return Record{}, io.EOF
	}
	start := r.off
	if cap(r.buf) < prefixLen {
		r.buf = make([]byte, 0, readChunk)
	}
	head := r.buf[:prefixLen]
	n, err := r.read(head[:markerLen])
	if err == io.EOF {
		r.eof = true
		return Record{}, io.EOF
	}
	if err != nil {
		return Record{}, r.truncated(start)
	}
	if [markerLen]byte(head[:markerLen]) != marker {
		return Record{}, r.damaged(start, head[:n], "no sync marker")
	}
	if _, err := r.read(head[markerLen:]); err != nil {
		return Record{}, r.damaged(start, head[:markerLen], "length")
	}
	size := int(binary.LittleEndian.Uint32(head[markerLen:]))
	if size < fixedBody+1 || size > MaxBody {
		return Record{}, r.damaged(start, head, "length")
	}
	// Read the body and checksum in chunks, growing the buffer only as
	// bytes actually arrive.
	total := prefixLen + size + crcLen
	rec := head
	for len(rec) < total {
		step := min(total-len(rec), readChunk)
		rec = slices.Grow(rec, step)[:len(rec)+step]
		got, err := r.read(rec[len(rec)-step:])
		if err != nil {
			rec = rec[:len(rec)-step+got]
			r.buf = rec[:0]
			return Record{}, r.damaged(start, rec, "length")
		}
	}
	r.buf = rec[:0]
	body := rec[prefixLen : prefixLen+size]
	want := binary.LittleEndian.Uint32(rec[prefixLen+size:])
	if crc32.Checksum(rec[markerLen:prefixLen+size], castagnoli) != want {
		return Record{}, r.damaged(start, rec, "checksum")
	}
	s := int(body[8])
	if s == 0 || fixedBody+s > size {
		return Record{}, r.damaged(start, rec, "subject")
	}
	return Record{
		At:      time.Unix(0, int64(binary.LittleEndian.Uint64(body))),
		Subject: subject(body[fixedBody : fixedBody+s]),
		Data:    body[fixedBody+s:],
	}, nil
}

// damaged skips a bad record and reports it. When no marker follows and
// the bad record ran into the end of the file, the damage is a torn tail.
func (r *Reader) damaged(start int64, got []byte, reason string) error {
	found := r.resync(got)
	e := &CorruptError{Offset: start, Skipped: r.off - start, Reason: reason, err: ErrCorrupt}
	if !found {
		r.eof = true
		if reason == "length" {
			e.Reason, e.err = "truncated", ErrTruncated
		}
	}
	return e
}

func (r *Reader) truncated(start int64) error {
	r.eof = true
	return &CorruptError{Offset: start, Skipped: r.off - start, Reason: "truncated", err: ErrTruncated}
}

// File is a Reader over an open session file.
type File struct {
	*Reader
	f *os.File
}

// Open opens the session file at path and reads its header.
func Open(path string) (*File, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("session: %w", err)
	}
	r, err := NewReader(f)
	if err != nil {
		f.Close()
		return nil, fmt.Errorf("%w (%s)", err, path)
	}
	return &File{Reader: r, f: f}, nil
}

// Close closes the file.
func (f *File) Close() error { return f.f.Close() }

// subject returns the subject suffix, without allocating for the four
// subjects of the wire protocol.
func subject(b []byte) string {
	switch string(b) {
	case "block":
		return "block"
	case "frames":
		return "frames"
	case "spikes":
		return "spikes"
	case "control":
		return "control"
	}
	return string(b)
}
