// Package session owns the session file: every message one rig sent, in the
// order it arrived, each with its wall-clock arrival time and its subject
// suffix. It has a Writer (append-only, flushed at least once a second) and a
// Reader that survives a torn tail and skips damaged records, reporting each
// one with its byte offset.
//
// # File layout
//
// A session file is a header followed by records. All integers are
// little-endian.
//
//	line 1   "livefield session 1\n"                  (Magic)
//	line 2   one JSON object and "\n", at most 4 KiB   (Header)
//	         e.g. {"rig":"rig1","prefix":"livefield.rig1","created":"2026-05-01T09:00:00Z"}
//	records  repeated until the end of the file
//
// One record is
//
//	offset size  field
//	0      4     sync marker F7 6C 66 FE (the bytes 0xF7, 'l', 'f', 0xFE)
//	4      4     n, the length of the body in bytes, 9 + s + len(payload), at most MaxBody
//	8      8     arrival time, int64 nanoseconds since 1970-01-01 UTC
//	16     1     s, the length of the subject suffix, 1…255
//	17     s     subject suffix, e.g. "block", "frames", "spikes", "control"
//	17+s   n-9-s payload: the message bytes exactly as received
//	8+n    4     CRC-32C (Castagnoli) of bytes 4…8+n (the length and the body)
//
// so the body is the arrival time, the subject and the payload, and the
// record takes n + 12 bytes. The marker's first and last bytes never occur in
// UTF-8 text, so they cannot appear inside a JSON payload; the reader uses the
// marker to find the next record after damage. A record is accepted only when
// its marker, length bound and checksum all hold.
//
// # Durability
//
// The Writer buffers records and writes the buffer out when it is older than
// FlushEvery (one second): either on the next Write, or from a timer when no
// write follows. A crash thus loses at most the last second. Sync writes the
// buffer and calls the file's Sync (fsync); the recorder calls it at every
// block end. The first write error is kept: every later call returns it, and
// whatever reached the file before it stays readable, because a torn last
// record is recognised as such.
//
// # Reading damaged files
//
// Next returns records in file order. A record whose marker, length or
// checksum is wrong is reported as a *CorruptError carrying the byte offset
// where the damage starts and how many bytes were skipped; the reader has
// then already resynchronised on the next marker, so the following Next
// returns the next good record. A file that ends inside a record yields a
// *CorruptError that wraps ErrTruncated, then io.EOF. Lengths above MaxBody
// are refused before any allocation, so a hostile file cannot make the reader
// hold more than one MaxBody buffer.
//
// # Goroutines
//
// A Writer is safe for concurrent use: its methods may be called from any
// goroutine (the recorder writes from a NATS callback while a timer flushes).
// A Reader belongs to one goroutine.
package session
