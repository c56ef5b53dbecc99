package session

import (
	"encoding/binary"
	"encoding/json"
	"errors"
	"fmt"
	"hash/crc32"
	"io"
	"os"
	"sync"
	"time"
)

// flushSize is the buffer size that triggers a write before FlushEvery.
const flushSize = 64 << 10

// ErrClosed is returned by a Writer's methods after Close.
var ErrClosed = errors.New("session: writer closed")

// Stats count what a Writer has taken.
type Stats struct {
	Records int64 // records accepted by Write
	Bytes   int64 // bytes accepted, header included (written or still buffered)
	Written int64 // bytes handed to the file successfully
}

// Writer appends records to a session file. See the package documentation
// for when it flushes; all methods are safe for concurrent use.
type Writer struct {
	mu     sync.Mutex
	dst    io.Writer
	name   string // for error messages
	buf    []byte
	timer  *time.Timer
	err    error // the first write error, returned by every later call
	closed bool
	stats  Stats
}

// Create makes a new session file at path (it refuses to overwrite one)
// and writes its header.
func Create(path string, h Header) (*Writer, error) {
	if err := checkHeader(h); err != nil {
		return nil, err
	}
	f, err := os.OpenFile(path, os.O_WRONLY|os.O_CREATE|os.O_EXCL, 0o644)
	if err != nil {
		return nil, fmt.Errorf("session: %w", err)
	}
	w, err := newWriter(f, path, h)
	if err != nil {
		f.Close()
		return nil, err
	}
	return w, nil
}

// NewWriter writes the header to dst and returns a Writer appending to it.
// When dst has a Sync() error method, Sync and Close call it; when it is an
// io.Closer, Close closes it.
func NewWriter(dst io.Writer, h Header) (*Writer, error) {
	if err := checkHeader(h); err != nil {
		return nil, err
	}
	return newWriter(dst, "", h)
}

func newWriter(dst io.Writer, name string, h Header) (*Writer, error) {
	w := &Writer{dst: dst, name: name}
	hb, _ := json.Marshal(h) // checked by checkHeader
	w.buf = append(w.buf, Magic...)
	w.buf = append(w.buf, hb...)
	w.buf = append(w.buf, '\n')
	w.stats.Bytes = int64(len(w.buf))
	w.mu.Lock()
	defer w.mu.Unlock()
	if err := w.flushLocked(); err != nil {
		return nil, err
	}
	return w, nil
}

// Write appends one record. The record's Data is copied; the caller may
// reuse it. It returns an error for a record the format cannot hold and the
// first write error of the file, if any.
func (w *Writer) Write(r Record) error {
	if err := checkRecord(r); err != nil {
		return err
	}
	w.mu.Lock()
	defer w.mu.Unlock()
	if w.closed {
		return ErrClosed
	}
	if w.err != nil {
		return w.err
	}
	start := len(w.buf)
	n := fixedBody + len(r.Subject) + len(r.Data)
	w.buf = append(w.buf, marker[:]...)
	w.buf = binary.LittleEndian.AppendUint32(w.buf, uint32(n))
	w.buf = binary.LittleEndian.AppendUint64(w.buf, uint64(r.At.UnixNano()))
	w.buf = append(w.buf, byte(len(r.Subject)))
	w.buf = append(w.buf, r.Subject...)
	w.buf = append(w.buf, r.Data...)
	sum := crc32.Checksum(w.buf[start+markerLen:], castagnoli)
	w.buf = binary.LittleEndian.AppendUint32(w.buf, sum)
	w.stats.Records++
	w.stats.Bytes += int64(len(w.buf) - start)
	switch {
	case len(w.buf) >= flushSize:
		return w.flushLocked()
	case w.timer == nil:
		// The first record of a fresh buffer: it is written within
		// FlushEvery, by the timer if no other call does it first.
		w.timer = time.AfterFunc(FlushEvery, w.timedFlush)
	}
	return nil
}

func (w *Writer) timedFlush() {
	w.mu.Lock()
	defer w.mu.Unlock()
	w.timer = nil
	if !w.closed && w.err == nil {
		_ = w.flushLocked() // kept in w.err for the next call
	}
}

// flushLocked hands the buffer to dst. Called with w.mu held.
func (w *Writer) flushLocked() error {
	if w.timer != nil {
		w.timer.Stop()
		w.timer = nil
	}
	if w.err != nil {
		return w.err
	}
	if len(w.buf) == 0 {
		return nil
	}
	n, err := w.dst.Write(w.buf)
	w.stats.Written += int64(n)
	if err == nil && n < len(w.buf) {
		err = io.ErrShortWrite
	}
	w.buf = w.buf[:0]
	if err != nil {
		w.err = w.wrap("writing", err)
		return w.err
	}
	return nil
}

func (w *Writer) wrap(op string, err error) error {
	if w.name != "" {
		return fmt.Errorf("session: %s %s after %d bytes: %w", op, w.name, w.stats.Written, err)
	}
	return fmt.Errorf("session: %s after %d bytes: %w", op, w.stats.Written, err)
}

// Flush writes the buffered records to the file now.
func (w *Writer) Flush() error {
	w.mu.Lock()
	defer w.mu.Unlock()
	if w.closed {
		return ErrClosed
	}
	return w.flushLocked()
}

// Sync writes the buffered records and asks the file system to put them on
// disk (fsync). The recorder calls it at every block end.
func (w *Writer) Sync() error {
	w.mu.Lock()
	defer w.mu.Unlock()
	if w.closed {
		return ErrClosed
	}
	return w.syncLocked()
}

func (w *Writer) syncLocked() error {
	if err := w.flushLocked(); err != nil {
		return err
	}
	if s, ok := w.dst.(interface{ Sync() error }); ok {
		if err := s.Sync(); err != nil {
			w.err = w.wrap("syncing", err)
			return w.err
		}
	}
	return nil
}

// Close writes and syncs what is buffered and closes the file. It may be
// called more than once; later calls return the result of the first.
func (w *Writer) Close() error {
	w.mu.Lock()
	defer w.mu.Unlock()
	if w.closed {
		return w.err
	}
	w.closed = true
	err := w.syncLocked()
	if c, ok := w.dst.(io.Closer); ok {
		if cerr := c.Close(); cerr != nil && err == nil {
			w.err = w.wrap("closing", cerr)
			err = w.err
		}
	}
	return err
}

// Stats returns the counts so far.
func (w *Writer) Stats() Stats {
	w.mu.Lock()
	defer w.mu.Unlock()
	return w.stats
}
