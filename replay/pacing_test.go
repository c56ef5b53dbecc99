package replay

import (
	"context"
	"errors"
	"testing"
	"testing/synctest"
	"time"

	"livefield/replay/session"
)

// TestPlayPacingRealTimers plays the committed session with Play's own
// timers and clock inside a synctest bubble, whose clock moves only when
// every goroutine waits: each record is delivered exactly when it is due,
// (arrival − first − From) / speed after the start, and a context that
// ends mid-wait stops the playback then.
func TestPlayPacingRealTimers(t *testing.T) {
	records := readRecords(t, fixturePath)
	first := records[0].At
	t.Run("paced", func(t *testing.T) {
		synctest.Test(t, func(t *testing.T) {
			f, err := session.Open(fixturePath)
			if err != nil {
				t.Fatal(err)
			}
			defer f.Close()
			const speed, from = 4, 5 * time.Second
			var start time.Time
			late := 0
			st, err := Play(context.Background(), f.Reader, PlayOptions{Speed: speed, From: from}, func(r session.Record) error {
				if start.IsZero() {
					start = time.Now() // the first delivery: the running block's start
					return nil
				}
				due := time.Duration(float64(r.At.Sub(first)-from) / speed)
				if got := time.Since(start); got != due {
					late++
					if late < 5 {
						t.Errorf("record at %v delivered after %v, due after %v", r.At.Sub(first), got, due)
					}
				}
				return nil
			})
			if err != nil {
				t.Fatal(err)
			}
			if want := time.Duration(float64(st.Span-from) / speed); time.Since(start) != want {
				t.Errorf("played for %v, want %v", time.Since(start), want)
			}
		})
	})
	t.Run("cancelled", func(t *testing.T) {
		synctest.Test(t, func(t *testing.T) {
			f, err := session.Open(fixturePath)
			if err != nil {
				t.Fatal(err)
			}
			defer f.Close()
			ctx, cancel := context.WithTimeout(context.Background(), 3*time.Second)
			defer cancel()
			start := time.Now()
			_, err = Play(ctx, f.Reader, PlayOptions{Speed: 1}, func(session.Record) error { return nil })
			if !errors.Is(err, context.DeadlineExceeded) || time.Since(start) != 3*time.Second {
				t.Errorf("Play returned %v after %v, want the deadline after 3s", err, time.Since(start))
			}
		})
	})
}

// TestPracticeStopWhileWaiting stops a real-time practice of the twin-half
// session from another goroutine 8 s in, while the playback waits in the
// pause for the second half (due at 17.5 s): the wait ends at once, the
// stop is at the last record shown (the "clock" spike at 6 s) and the rest
// of the block plays at full speed, with no more waiting.
func TestPracticeStopWhileWaiting(t *testing.T) {
	// The matrix kernel's worker goroutines start on first use and live
	// on: start them outside the bubble, which must end with no goroutine
	// of its own left.
	runPractice(t, time.Hour)
	synctest.Test(t, func(t *testing.T) {
		p, f, _, _ := twinPractice(t, PracticeOptions{Speed: 1})
		start := time.Now()
		go func() {
			time.Sleep(8 * time.Second)
			p.Stop()
		}()
		rep, err := p.Run(context.Background(), f.Reader, "twin.lfs")
		if err != nil {
			t.Fatal(err)
		}
		if took := time.Since(start); took != 8*time.Second {
			t.Errorf("the practice took %v, want 8s (nothing waited for after the stop)", took)
		}
		if !rep.Stopped || float64(rep.StopS) != 6 || float64(rep.BlockS) != twinEnd {
			t.Errorf("stopped %v at %v s of %v s, want at 6 s of %v s", rep.Stopped, rep.StopS, rep.BlockS, twinEnd)
		}
	})
}
