package session

import (
	"bytes"
	"errors"
	"io"
	"testing"
)

// FuzzReader feeds arbitrary bytes to the reader: it must never panic,
// must always reach io.EOF, must consume at least one byte per error, and
// must report every damaged span as a *CorruptError.
func FuzzReader(f *testing.F) {
	clean, offs := encode(f, testRecords())
	f.Add(clean)
	f.Add(clean[:offs[2]+5])
	damaged := append([]byte(nil), clean...)
	damaged[offs[1]+12] ^= 0xFF
	f.Add(damaged)
	f.Fuzz(func(t *testing.T, data []byte) {
		r, err := NewReader(bytes.NewReader(data))
		if err != nil {
			return
		}
		for i := 0; ; i++ {
			if i > len(data) {
				t.Fatalf("%d calls to Next on %d bytes without io.EOF", i, len(data))
			}
			before := r.Offset()
			rec, err := r.Next()
			if err == io.EOF {
				return
			}
			if r.Offset() <= before {
				t.Fatalf("Next made no progress at byte %d", before)
			}
			var ce *CorruptError
			if err != nil && !errors.As(err, &ce) {
				t.Fatalf("error %v is not a *CorruptError", err)
			}
			if err == nil && (len(rec.Subject) == 0 || len(rec.Data) > MaxBody) {
				t.Fatalf("accepted a record the writer cannot produce: %q, %d bytes", rec.Subject, len(rec.Data))
			}
			if cap(r.buf) > MaxBody+prefixLen+crcLen+readChunk {
				t.Fatalf("buffer grew to %d bytes", cap(r.buf))
			}
		}
	})
}
