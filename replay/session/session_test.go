package session

import (
	"bytes"
	"encoding/binary"
	"errors"
	"fmt"
	"hash/crc32"
	"io"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"testing/synctest"
	"time"
)

var testHeader = Header{Rig: "rig1", Prefix: "livefield.rig1", Created: time.Date(2026, 5, 1, 9, 0, 0, 0, time.UTC)}

func testRecords() []Record {
	base := time.Date(2026, 5, 1, 9, 0, 1, 123456789, time.UTC)
	return []Record{
		{At: base, Subject: "block", Data: []byte(`{"kind":"start","block":"B1","t":0,"stimulus":{"type":"binary","width":4,"height":4,"seed":1}}`)},
		{At: base.Add(16 * time.Millisecond), Subject: "frames", Data: []byte(`{"block":"B1","index":[0,1],"t":[0,0.016]}`)},
		{At: base.Add(17 * time.Millisecond), Subject: "spikes", Data: []byte(`{"unit":["a"],"t":[0.01]}`)},
		{At: base.Add(18 * time.Millisecond), Subject: "control", Data: []byte{}},
		{At: base.Add(19 * time.Millisecond), Subject: "x", Data: bytes.Repeat([]byte{0xF7, 'l', 'f'}, 1000)},
		{At: base.Add(time.Hour), Subject: "block", Data: []byte(`{"kind":"end","block":"B1","t":3600}`)},
	}
}

// encode writes recs to a buffer and returns the bytes and the offset at
// which each record starts.
func encode(t testing.TB, recs []Record) ([]byte, []int64) {
	t.Helper()
	var buf bytes.Buffer
	w, err := NewWriter(&buf, testHeader)
	if err != nil {
		t.Fatal(err)
	}
	var offs []int64
	for _, r := range recs {
		if err := w.Flush(); err != nil {
			t.Fatal(err)
		}
		offs = append(offs, int64(buf.Len()))
		if err := w.Write(r); err != nil {
			t.Fatal(err)
		}
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	return buf.Bytes(), offs
}

// readAll returns the good records and the errors met, in order.
func readAll(t testing.TB, data []byte) ([]Record, []error) {
	t.Helper()
	r, err := NewReader(bytes.NewReader(data))
	if err != nil {
		t.Fatal(err)
	}
	var recs []Record
	var errs []error
	for i := 0; i < 1e6; i++ {
		rec, err := r.Next()
		if err == io.EOF {
			return recs, errs
		}
		if err != nil {
			errs = append(errs, err)
			continue
		}
		recs = append(recs, rec.Clone())
	}
	t.Fatal("reader does not reach the end")
	return nil, nil
}

func sameRecord(a, b Record) bool {
	return a.At.Equal(b.At) && a.Subject == b.Subject && bytes.Equal(a.Data, b.Data)
}

func TestRoundTrip(t *testing.T) {
	want := testRecords()
	data, _ := encode(t, want)
	r, err := NewReader(bytes.NewReader(data))
	if err != nil {
		t.Fatal(err)
	}
	if h := r.Header(); h.Rig != "rig1" || h.Prefix != "livefield.rig1" || !h.Created.Equal(testHeader.Created) {
		t.Errorf("header = %+v, want %+v", h, testHeader)
	}
	got, errs := readAll(t, data)
	if len(errs) != 0 {
		t.Fatalf("errors on a clean file: %v", errs)
	}
	if len(got) != len(want) {
		t.Fatalf("%d records, want %d", len(got), len(want))
	}
	for i := range want {
		if !sameRecord(got[i], want[i]) {
			t.Errorf("record %d = %v %q %q, want %v %q %q", i, got[i].At, got[i].Subject, got[i].Data, want[i].At, want[i].Subject, want[i].Data)
		}
	}
}

// TestLayout checks the bytes of one record against the layout in the
// package documentation, with the CRC-32C check value of "123456789",
// 0xE3069283, from the catalogue of parametrised CRC algorithms (Greg Cook,
// "CRC-32/ISCSI") and RFC 3720 appendix B.4.
func TestLayout(t *testing.T) {
	if got := crc32.Checksum([]byte("123456789"), castagnoli); got != 0xE3069283 {
		t.Fatalf("CRC-32C check value = %#x, want 0xe3069283", got)
	}
	var buf bytes.Buffer
	w, err := NewWriter(&buf, Header{Rig: "r", Prefix: "p"})
	if err != nil {
		t.Fatal(err)
	}
	at := time.Unix(0, 0x0102030405060708)
	if err := w.Write(Record{At: at, Subject: "spikes", Data: []byte("{}")}); err != nil {
		t.Fatal(err)
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	head := Magic + `{"rig":"r","prefix":"p","created":"0001-01-01T00:00:00Z"}` + "\n"
	if !strings.HasPrefix(buf.String(), head) {
		t.Fatalf("file starts %q, want %q", buf.String()[:min(len(head), buf.Len())], head)
	}
	rec := buf.Bytes()[len(head):]
	want := []byte{0xF7, 'l', 'f', 0xFE, 17, 0, 0, 0, 8, 7, 6, 5, 4, 3, 2, 1, 6, 's', 'p', 'i', 'k', 'e', 's', '{', '}'}
	if len(rec) != len(want)+4 || !bytes.Equal(rec[:len(want)], want) {
		t.Fatalf("record bytes\n% x\nwant\n% x + crc", rec, want)
	}
	if got, sum := binary.LittleEndian.Uint32(rec[len(want):]), crc32.Checksum(want[4:], castagnoli); got != sum {
		t.Errorf("stored crc %#x, CRC-32C of length and body %#x", got, sum)
	}
}

// TestTruncated cuts a file at every byte: the reader returns each record
// that is whole before the cut, then reports a torn tail (or nothing, when
// the cut falls between records), and never anything else.
func TestTruncated(t *testing.T) {
	recs := testRecords()
	data, offs := encode(t, recs)
	ends := append(offs[1:], int64(len(data)))
	for cut := offs[0]; cut <= int64(len(data)); cut++ {
		whole := 0
		boundary := cut == offs[0]
		for i, e := range ends {
			if e <= cut {
				whole = i + 1
			}
			boundary = boundary || e == cut
		}
		got, errs := readAll(t, data[:cut])
		if len(got) != whole {
			t.Fatalf("cut at %d: %d records, want %d", cut, len(got), whole)
		}
		switch {
		case boundary && len(errs) != 0:
			t.Fatalf("cut at record boundary %d: errors %v", cut, errs)
		case !boundary:
			var ce *CorruptError
			if len(errs) != 1 || !errors.As(errs[0], &ce) || !errors.Is(errs[0], ErrTruncated) {
				t.Fatalf("cut at %d: errors %v, want one truncation", cut, errs)
			}
			if ce.Offset != offs[whole] {
				t.Fatalf("cut at %d: truncation reported at %d, want %d", cut, ce.Offset, offs[whole])
			}
		}
	}
}

func TestCorruptRecordSkipped(t *testing.T) {
	recs := testRecords()
	clean, offs := encode(t, recs)
	const k = 2 // the damaged record
	cases := []struct {
		name    string
		damage  func([]byte) []byte
		reason  string
		lost    int // records lost
		skipped int64
	}{
		{"payload bit flip", func(b []byte) []byte { b[offs[k]+20] ^= 0x10; return b }, "checksum", 1, offs[k+1] - offs[k]},
		{"length grown", func(b []byte) []byte { b[offs[k]+4] += 3; return b }, "checksum", 1, offs[k+1] - offs[k]},
		{"length huge", func(b []byte) []byte { binary.LittleEndian.PutUint32(b[offs[k]+4:], 0xFFFFFFF0); return b }, "length", 1, offs[k+1] - offs[k]},
		{"length past the end", func(b []byte) []byte { binary.LittleEndian.PutUint32(b[offs[k]+4:], MaxBody); return b }, "length", 1, offs[k+1] - offs[k]},
		{"marker overwritten", func(b []byte) []byte { b[offs[k]] = 'x'; return b }, "no sync marker", 1, offs[k+1] - offs[k]},
		{"garbage inserted", func(b []byte) []byte {
			return append(append(append([]byte(nil), b[:offs[k]]...), "garbage\xF7l"...), b[offs[k]:]...)
		}, "no sync marker", 0, 9},
		{"bytes lost", func(b []byte) []byte { return append(append([]byte(nil), b[:offs[k]+10]...), b[offs[k]+15:]...) }, "checksum", 1, offs[k+1] - offs[k] - 5},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			data := c.damage(append([]byte(nil), clean...))
			got, errs := readAll(t, data)
			var ce *CorruptError
			if len(errs) != 1 || !errors.As(errs[0], &ce) {
				t.Fatalf("errors %v, want one *CorruptError", errs)
			}
			if ce.Offset != offs[k] || ce.Reason != c.reason || ce.Skipped != c.skipped {
				t.Errorf("reported offset %d reason %q skipped %d, want %d %q %d", ce.Offset, ce.Reason, ce.Skipped, offs[k], c.reason, c.skipped)
			}
			if !errors.Is(ce, ErrCorrupt) || errors.Is(ce, ErrTruncated) {
				t.Errorf("%v should wrap ErrCorrupt only", ce)
			}
			if !strings.Contains(ce.Error(), fmt.Sprintf("byte %d", offs[k])) {
				t.Errorf("message %q does not name the offset", ce.Error())
			}
			if len(got) != len(recs)-c.lost {
				t.Fatalf("%d records, want %d", len(got), len(recs)-c.lost)
			}
			// Every record after the damage comes back intact.
			for i := k + c.lost; i < len(recs); i++ {
				if !sameRecord(got[i-c.lost], recs[i]) {
					t.Errorf("record %d after the damage differs", i)
				}
			}
		})
	}
}

func TestBadHeader(t *testing.T) {
	cases := []struct{ name, data, want string }{
		{"empty", "", "empty file"},
		{"not a session", "PK\x03\x04 something else entirely", "not a session file"},
		{"no header line", Magic + `{"rig":"a"`, "header line"},
		{"unknown header field", Magic + `{"rig":"a","colour":1}` + "\n", "unknown field"},
		{"header too long", Magic + `{"rig":"` + strings.Repeat("a", MaxHeader) + `"}` + "\n", "longer than"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			_, err := NewReader(strings.NewReader(c.data))
			if err == nil || !strings.HasPrefix(err.Error(), "session: ") || !strings.Contains(err.Error(), c.want) {
				t.Errorf("error %v, want one containing %q", err, c.want)
			}
		})
	}
}

func TestWriterRefuses(t *testing.T) {
	w, err := NewWriter(io.Discard, testHeader)
	if err != nil {
		t.Fatal(err)
	}
	cases := []struct {
		name string
		rec  Record
	}{
		{"no subject", Record{Data: []byte("{}")}},
		{"long subject", Record{Subject: strings.Repeat("s", MaxSubject+1)}},
		{"too large", Record{Subject: "spikes", Data: make([]byte, MaxBody)}},
	}
	for _, c := range cases {
		if err := w.Write(c.rec); err == nil || !strings.HasPrefix(err.Error(), "session: ") {
			t.Errorf("%s: error %v", c.name, err)
		}
	}
	if err := w.Write(Record{Subject: "spikes", Data: make([]byte, MaxBody-fixedBody-6)}); err != nil {
		t.Errorf("largest record refused: %v", err)
	}
}

// failAfter accepts n bytes, then fails like a full disk.
type failAfter struct {
	bytes.Buffer
	n int
}

var errFull = errors.New("no space left on device")

func (f *failAfter) Write(p []byte) (int, error) {
	if room := f.n - f.Len(); len(p) > room {
		f.Buffer.Write(p[:max(room, 0)])
		return max(room, 0), errFull
	}
	return f.Buffer.Write(p)
}

func TestWriteErrorKeepsWhatWasWritten(t *testing.T) {
	recs := testRecords()
	clean, offs := encode(t, recs)
	for _, limit := range []int{int(offs[0]), int(offs[3]) + 7, int(offs[5]) - 1, len(clean) - 1} {
		t.Run(fmt.Sprintf("fails after %d bytes", limit), func(t *testing.T) {
			dst := &failAfter{n: limit}
			w, err := NewWriter(dst, testHeader)
			if err != nil {
				t.Fatal(err)
			}
			var werr error
			for _, r := range recs {
				if werr = w.Write(r); werr == nil {
					werr = w.Flush()
				}
				if werr != nil {
					break
				}
			}
			if werr == nil || !errors.Is(werr, errFull) || !strings.HasPrefix(werr.Error(), "session: writing") {
				t.Fatalf("write error %v, want a session: writing error wrapping the disk's", werr)
			}
			if err := w.Write(recs[0]); !errors.Is(err, errFull) {
				t.Errorf("a write after the failure returned %v, want the first error again", err)
			}
			if err := w.Close(); !errors.Is(err, errFull) {
				t.Errorf("Close returned %v, want the write error", err)
			}
			whole := 0
			for i := range offs {
				end := int64(len(clean))
				if i+1 < len(offs) {
					end = offs[i+1]
				}
				if end <= int64(limit) {
					whole = i + 1
				}
			}
			got, errs := readAll(t, dst.Bytes())
			if len(got) != whole {
				t.Errorf("%d records readable, want %d", len(got), whole)
			}
			for _, e := range errs {
				if !errors.Is(e, ErrTruncated) {
					t.Errorf("unexpected error %v", e)
				}
			}
		})
	}
}

// TestDiskFull writes to /dev/full, which fails every write with ENOSPC
// (Linux, null(4)).
func TestDiskFull(t *testing.T) {
	f, err := os.OpenFile("/dev/full", os.O_WRONLY, 0)
	if err != nil {
		t.Skip("no /dev/full:", err)
	}
	_, err = NewWriter(f, testHeader)
	if err == nil || !strings.Contains(err.Error(), "no space left on device") || !strings.HasPrefix(err.Error(), "session: writing") {
		t.Errorf("error %v, want session: writing … no space left on device", err)
	}
	f.Close()
}

func TestCreate(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "s.lfs")
	w, err := Create(path, testHeader)
	if err != nil {
		t.Fatal(err)
	}
	for _, r := range testRecords() {
		if err := w.Write(r); err != nil {
			t.Fatal(err)
		}
	}
	if err := w.Sync(); err != nil {
		t.Fatal(err)
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	if err := w.Close(); err != nil {
		t.Errorf("second Close: %v", err)
	}
	if err := w.Write(testRecords()[0]); !errors.Is(err, ErrClosed) {
		t.Errorf("Write after Close: %v", err)
	}
	if _, err := Create(path, testHeader); err == nil || !strings.Contains(err.Error(), "exists") {
		t.Errorf("Create over an existing file: %v", err)
	}
	if _, err := Create(filepath.Join(dir, "no", "such", "dir.lfs"), testHeader); err == nil || !strings.HasPrefix(err.Error(), "session: ") {
		t.Errorf("Create in a missing directory: %v", err)
	}
	f, err := Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	n := 0
	for {
		_, err := f.Next()
		if err == io.EOF {
			break
		}
		if err != nil {
			t.Fatal(err)
		}
		n++
	}
	if n != len(testRecords()) {
		t.Errorf("%d records read back, want %d", n, len(testRecords()))
	}
}

// TestFlushWithinASecond runs the writer's timer in virtual time: a single
// record reaches the file FlushEvery after it was written, with no other call.
func TestFlushWithinASecond(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		var buf lockedBuffer
		w, err := NewWriter(&buf, testHeader)
		if err != nil {
			t.Fatal(err)
		}
		head := buf.Len()
		if err := w.Write(testRecords()[1]); err != nil {
			t.Fatal(err)
		}
		time.Sleep(FlushEvery - time.Millisecond)
		synctest.Wait()
		if buf.Len() != head {
			t.Fatalf("flushed after %v, before FlushEvery", FlushEvery-time.Millisecond)
		}
		time.Sleep(time.Millisecond)
		synctest.Wait()
		if buf.Len() == head {
			t.Fatalf("record still buffered %v after it was written", FlushEvery)
		}
		w.Close()
	})
}

type lockedBuffer struct {
	mu  chan struct{}
	buf bytes.Buffer
}

func (b *lockedBuffer) lock() {
	if b.mu == nil {
		b.mu = make(chan struct{}, 1)
	}
	b.mu <- struct{}{}
}

func (b *lockedBuffer) Write(p []byte) (int, error) {
	b.lock()
	defer func() { <-b.mu }()
	return b.buf.Write(p)
}
func (b *lockedBuffer) Len() int { b.lock(); defer func() { <-b.mu }(); return b.buf.Len() }

func TestNextDoesNotAllocate(t *testing.T) {
	recs := testRecords()[:4]
	var many []Record
	for range 200 {
		many = append(many, recs...)
	}
	data, _ := encode(t, many)
	r, err := NewReader(bytes.NewReader(data))
	if err != nil {
		t.Fatal(err)
	}
	r.Next() // sizes the buffer
	if n := testing.AllocsPerRun(500, func() {
		if _, err := r.Next(); err != nil {
			t.Fatal(err)
		}
	}); n != 0 {
		t.Errorf("Next allocates %v times per record", n)
	}
}

func BenchmarkRead(b *testing.B) {
	recs := testRecords()[:3]
	var many []Record
	for range 1000 {
		many = append(many, recs...)
	}
	data, _ := encode(b, many)
	b.ReportAllocs()
	b.SetBytes(int64(len(data)))
	for b.Loop() {
		r, _ := NewReader(bytes.NewReader(data))
		for {
			if _, err := r.Next(); err != nil {
				break
			}
		}
	}
}
