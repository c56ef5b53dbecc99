package replay

import (
	"errors"
	"fmt"
	"strings"
	"sync"
	"time"

	"github.com/nats-io/nats.go"

	"livefield/replay/session"
	"livefield/stream/wire"
)

// Pending limits of the recorder's subscription: generous, since a
// recorder that falls behind should buffer rather than drop; messages
// dropped past them are counted in RecordStats.Dropped.
const (
	recordPendingMsgs  = 1 << 20
	recordPendingBytes = 1 << 30
)

// RecordStats count what a Recorder has written.
type RecordStats struct {
	Messages int64 // records written
	Bytes    int64 // bytes of the file, header included
	Blocks   int64 // block starts seen
	Dropped  int64 // messages the NATS client dropped (slow consumer)
}

// Recorder writes every message of one rig to a session file.
type Recorder struct {
	nc     *nats.Conn
	sub    *nats.Subscription
	w      *session.Writer
	prefix string
	now    func() time.Time

	mu     sync.Mutex
	blocks int64
	err    error // the first write error
	once   sync.Once
	cerr   error
}

// StartRecorder subscribes to prefix+".>" on nc and appends each message to w,
// stamped with now() (time.Now when nil) as it arrives. At each block end
// the file is synced to disk. The writer is closed by Close.
func StartRecorder(nc *nats.Conn, prefix string, w *session.Writer, now func() time.Time) (*Recorder, error) {
	if nc == nil || w == nil {
		return nil, errors.New("replay: StartRecorder needs a NATS connection and a session writer")
	}
	if prefix == "" || strings.ContainsAny(prefix, "*> \t\r\n") || strings.HasSuffix(prefix, ".") {
		return nil, fmt.Errorf("replay: bad subject prefix %q", prefix)
	}
	if now == nil {
		now = time.Now
	}
	rc := &Recorder{nc: nc, w: w, prefix: prefix + ".", now: now}
	sub, err := nc.Subscribe(prefix+".>", rc.onMsg)
	if err != nil {
		return nil, fmt.Errorf("replay: subscribing to %s.>: %w", prefix, err)
	}
	if err := sub.SetPendingLimits(recordPendingMsgs, recordPendingBytes); err != nil {
		_ = sub.Unsubscribe()
		return nil, fmt.Errorf("replay: %w", err)
	}
	if err := nc.Flush(); err != nil {
		_ = sub.Unsubscribe()
		return nil, fmt.Errorf("replay: subscribing to %s.>: %w", prefix, err)
	}
	rc.sub = sub
	return rc, nil
}

// onMsg runs on the NATS delivery goroutine.
func (rc *Recorder) onMsg(m *nats.Msg) {
	at := rc.now()
	suffix := strings.TrimPrefix(m.Subject, rc.prefix)
	err := rc.w.Write(session.Record{At: at, Subject: suffix, Data: m.Data})
	if err == nil && suffix == wire.SubjectBlock {
		if b, derr := wire.DecodeBlock(m.Data); derr == nil {
			rc.mu.Lock()
			if b.Kind == wire.KindStart {
				rc.blocks++
			}
			rc.mu.Unlock()
			if b.Kind == wire.KindEnd {
				err = rc.w.Sync()
			}
		}
	}
	if err != nil {
		rc.mu.Lock()
		if rc.err == nil && !errors.Is(err, session.ErrClosed) {
			rc.err = err
		}
		rc.mu.Unlock()
	}
}

// Err is the first error writing the file (nil while all is well). After
// one, later messages are not recorded; what was written stays readable.
func (rc *Recorder) Err() error {
	rc.mu.Lock()
	defer rc.mu.Unlock()
	return rc.err
}

// Stats returns the counts so far.
func (rc *Recorder) Stats() RecordStats {
	ws := rc.w.Stats()
	rc.mu.Lock()
	st := RecordStats{Messages: ws.Records, Bytes: ws.Bytes, Blocks: rc.blocks}
	rc.mu.Unlock()
	if d, err := rc.sub.Dropped(); err == nil {
		st.Dropped = int64(d)
	}
	return st
}

// Close stops the subscription after the messages already delivered to it
// are written, then closes the file. It may be called more than once; it
// returns the first write error, if any.
func (rc *Recorder) Close() error {
	rc.once.Do(func() {
		// Drain delivers what the server has already sent, then removes
		// the subscription.
		if err := rc.sub.Drain(); err == nil {
			for deadline := time.Now().Add(5 * time.Second); rc.sub.IsValid() && time.Now().Before(deadline); {
				time.Sleep(5 * time.Millisecond)
			}
		} else {
			_ = rc.sub.Unsubscribe()
		}
		cerr := rc.w.Close()
		rc.mu.Lock()
		if rc.err == nil {
			rc.err = cerr
		}
		rc.cerr = rc.err
		rc.mu.Unlock()
	})
	return rc.cerr
}
