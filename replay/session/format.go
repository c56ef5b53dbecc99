package session

import (
	"encoding/json"
	"errors"
	"fmt"
	"hash/crc32"
	"time"
)

// Format constants; the package documentation describes the layout.
const (
	// Magic is the first line of every session file.
	Magic = "livefield session 1\n"
	// MaxHeader is the longest header line, newline included.
	MaxHeader = 4 << 10
	// MaxBody is the largest record body (arrival time, subject and
	// payload): 2 MiB, twice the largest message the wire protocol accepts.
	MaxBody = 2 << 20
	// MaxSubject is the longest subject suffix.
	MaxSubject = 255
	// FlushEvery is the longest time a written record waits in the buffer.
	FlushEvery = time.Second

	markerLen = 4
	prefixLen = markerLen + 4 // marker and length
	fixedBody = 8 + 1         // arrival time and subject length
	crcLen    = 4
)

// marker starts every record. 0xF7 and 0xFE never occur in UTF-8.
var marker = [markerLen]byte{0xF7, 'l', 'f', 0xFE}

var castagnoli = crc32.MakeTable(crc32.Castagnoli)

// Header describes the recording as a whole.
type Header struct {
	Rig     string    `json:"rig"`     // the rig's name
	Prefix  string    `json:"prefix"`  // the subject prefix the recorder subscribed to
	Created time.Time `json:"created"` // when recording began
}

// Record is one message as it arrived.
type Record struct {
	At      time.Time // wall-clock arrival, kept to the nanosecond
	Subject string    // subject suffix after the prefix: "block", "frames", "spikes" or "control"
	Data    []byte    // the message bytes as received
}

// Clone returns a copy of r whose Data does not share the reader's buffer.
func (r Record) Clone() Record {
	r.Data = append([]byte(nil), r.Data...)
	return r
}

// ErrCorrupt is wrapped by every *CorruptError.
var ErrCorrupt = errors.New("session: corrupt data")

// ErrTruncated is wrapped by the *CorruptError of a file that ends inside a
// record (a crash or a full disk during the last write).
var ErrTruncated = errors.New("session: file ends inside a record")

// CorruptError reports damaged bytes. The reader has skipped them.
type CorruptError struct {
	Offset  int64  // byte offset in the file where the damaged record starts
	Skipped int64  // bytes skipped, up to the next sync marker or the end
	Reason  string // what was wrong: "no sync marker", "length", "checksum", "subject", "truncated"
	err     error
}

func (e *CorruptError) Error() string {
	return fmt.Sprintf("session: damaged record at byte %d (%s), skipped %d bytes", e.Offset, e.Reason, e.Skipped)
}

// Unwrap gives ErrTruncated for a torn tail and ErrCorrupt otherwise.
func (e *CorruptError) Unwrap() error { return e.err }

func checkHeader(h Header) error {
	if len(h.Rig) > 256 || len(h.Prefix) > 256 {
		return errors.New("session: header rig or prefix longer than 256 bytes")
	}
	b, err := json.Marshal(h)
	if err != nil {
		return fmt.Errorf("session: header: %w", err)
	}
	if len(b)+1 > MaxHeader {
		return fmt.Errorf("session: header of %d bytes is over %d", len(b)+1, MaxHeader)
	}
	return nil
}

func checkRecord(r Record) error {
	if n := len(r.Subject); n == 0 || n > MaxSubject {
		return fmt.Errorf("session: subject of %d bytes not in 1…%d", n, MaxSubject)
	}
	if n := fixedBody + len(r.Subject) + len(r.Data); n > MaxBody {
		return fmt.Errorf("session: record body of %d bytes is over %d", n, MaxBody)
	}
	return nil
}
