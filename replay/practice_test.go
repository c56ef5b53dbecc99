package replay

import (
	"context"
	"encoding/json"
	"fmt"
	"math"
	"net/http"
	"net/http/httptest"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"testing"
	"time"

	"livefield/display"
	"livefield/replay/session"
	"livefield/stream/npy"
	"livefield/stream/stimulus"
)

// The twin-half session: a 4×4 movie of 100 frames (see twinPixel) is
// shown twice at 20 Hz, 0–5 s and 17–22 s, with a 12 s pause
// between (longer than binning's 10 s gap limit, so the pause gives no
// bins), and the block ends 11 s after the last onset (again a gap). Unit
// "early" fires the same spikes relative to the frames in both halves; unit
// "late" fires in the second half only; unit "clock" fires once in the
// pause, which moves the watermark so the first half's bins close. Messages
// arrive in batches every 0.5 s; the block starts at arrival 0 and ends at
// arrival 33 s.
const (
	twinFrames = 100
	twinPeriod = 0.05
	twinLags   = 3
	twinSecond = 17.0 // acquisition time of the second half's first onset
	twinEnd    = 33.0
)

// twinPixel is pixel p of movie frame f: blank for the first and last
// twinLags frames; in between, 47 frames of ±1 binary noise followed by
// their negatives, so that every pixel sums to exactly zero over the movie
// (the mean stimulus is zero however many bins are counted).
func twinPixel(f, p int) float64 {
	const n = (twinFrames - 2*twinLags) / 2
	if f < twinLags || f >= twinFrames-twinLags {
		return 0
	}
	sign, g := 1.0, f-twinLags
	if g >= n {
		sign, g = -1, g-n
	}
	if stimulus.SplitMix64(99, uint64(g*16+p))>>63 == 1 {
		return sign
	}
	return -sign
}

func twinMovie(t testing.TB, dir string) {
	t.Helper()
	data := make([]float64, twinFrames*16)
	for f := 0; f < twinFrames; f++ {
		for p := 0; p < 16; p++ {
			data[f*16+p] = twinPixel(f, p)
		}
	}
	fh, err := os.Create(filepath.Join(dir, "twin.npy"))
	if err != nil {
		t.Fatal(err)
	}
	defer fh.Close()
	if err := npy.Write(fh, []int{twinFrames, 4, 4}, data); err != nil {
		t.Fatal(err)
	}
}

// earlySpikes is unit "early"'s spikes of one half: one spike in the middle
// of bin i when pixel 5 of the frame one bin earlier was bright.
func earlySpikes(data func(f int) float64, onset func(i int) float64) []float64 {
	var out []float64
	for i := 1; i < twinFrames; i++ {
		if data(i-1) > 0 {
			out = append(out, onset(i)+twinPeriod/2)
		}
	}
	return out
}

func writeTwin(t testing.TB, path string) (earlyPerHalf, late int) {
	t.Helper()
	w, err := session.Create(path, session.Header{Rig: "twin", Prefix: "livefield.twin"})
	if err != nil {
		t.Fatal(err)
	}
	base := time.Date(2026, 5, 1, 10, 0, 0, 0, time.UTC)
	at := func(s float64) time.Time { return base.Add(time.Duration(math.Round(s * 1e9))) }
	put := func(s float64, subj, data string) {
		if err := w.Write(session.Record{At: at(s), Subject: subj, Data: []byte(data)}); err != nil {
			t.Fatal(err)
		}
	}
	pix := func(f int) float64 { return twinPixel(f, 5) }
	put(0, "block", fmt.Sprintf(`{"kind":"start","block":"T1","t":0,"stimulus":{"type":"movie","file":"twin.npy"},"lags":%d,"frame_period":%g}`, twinLags, twinPeriod))
	half := func(t0 float64, withLate bool) {
		onset := func(i int) float64 { return t0 + float64(i)*twinPeriod }
		early := earlySpikes(pix, onset)
		earlyPerHalf = len(early)
		for b := 0; b < twinFrames/10; b++ {
			var idx, ts []string
			type spike struct {
				unit string
				t    float64
			}
			var spikes []spike
			for i := b * 10; i < b*10+10; i++ {
				idx = append(idx, fmt.Sprint(i))
				ts = append(ts, fmt.Sprint(onset(i)))
			}
			lo, hi := onset(b*10), onset(b*10+10)
			for _, s := range early {
				if s >= lo && s < hi {
					spikes = append(spikes, spike{`"early"`, s})
				}
			}
			if withLate {
				// Not in the last frame, whose interval is a gap.
				for i := b * 10; i < min(b*10+10, twinFrames-1); i += 3 {
					spikes = append(spikes, spike{`"late"`, onset(i) + 0.01})
					late++
				}
			}
			sort.Slice(spikes, func(i, j int) bool { return spikes[i].t < spikes[j].t })
			var units, sp []string
			for _, x := range spikes {
				units, sp = append(units, x.unit), append(sp, fmt.Sprint(x.t))
			}
			sendAt := t0 + float64(b+1)*0.5
			put(sendAt, "frames", `{"block":"T1","index":[`+strings.Join(idx, ",")+`],"t":[`+strings.Join(ts, ",")+`]}`)
			put(sendAt, "spikes", `{"unit":[`+strings.Join(units, ",")+`],"t":[`+strings.Join(sp, ",")+`]}`)
		}
	}
	half(0, false)
	put(6, "spikes", `{"unit":["clock"],"t":[6]}`)
	half(twinSecond, true)
	put(twinEnd, "block", fmt.Sprintf(`{"kind":"end","block":"T1","t":%g}`, twinSecond+float64(twinFrames-1)*twinPeriod+11))
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	return earlyPerHalf, late
}

// twinPractice prepares a practice of the twin-half session with opt (its
// stimulus directory filled in) and opens the session, closed when the
// test ends. early and late are writeTwin's spike counts.
func twinPractice(t *testing.T, opt PracticeOptions) (p *Practice, f *session.File, early, late int) {
	t.Helper()
	dir := t.TempDir()
	twinMovie(t, dir)
	path := filepath.Join(dir, "twin.lfs")
	early, late = writeTwin(t, path)
	opt.Feed.StimuliDir = dir
	p, err := NewPractice(opt)
	if err != nil {
		t.Fatal(err)
	}
	f, err = session.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { f.Close() })
	return p, f, early, late
}

// runPractice runs a full-speed practice of the twin-half session that
// stops by itself at stopAt.
func runPractice(t *testing.T, stopAt time.Duration) (*Report, *Practice, int, int) {
	t.Helper()
	p, f, early, late := twinPractice(t, PracticeOptions{StopAt: stopAt})
	rep, err := p.Run(context.Background(), f.Reader, "twin.lfs")
	if err != nil {
		t.Fatal(err)
	}
	return rep, p, early, late
}

func unitScore(t *testing.T, rep *Report, id string) UnitScore {
	t.Helper()
	for _, u := range rep.Units {
		if u.ID == id {
			return u
		}
	}
	t.Fatalf("unit %q missing from the report: %+v", id, rep.Units)
	return UnitScore{}
}

func near(a, b, tol float64) bool { return math.Abs(a-b) <= tol }

// TestPracticeScore: stopping in the pause of the twin-half session. The
// expected numbers follow from the construction: the stop is at 10 s of a
// 33 s block (23 s saved); the display then shows exactly the first half,
// and the full block is the first half twice over, so the sums behind
// "early"'s STA, Σyx and Σy, are doubled, and the mean stimulus is zero in
// both (the movie sums to zero at every pixel): the STA Σyx/Σy − x̄ is
// unchanged and its correlation is 1. "late" had no spikes
// at the stop (no estimate, correlation null), "clock" never has a binned
// spike.
func TestPracticeScore(t *testing.T) {
	rep, _, early, late := runPractice(t, 10*time.Second)
	if rep.State != PracticeDone || !rep.Stopped || rep.Block != "T1" {
		t.Fatalf("report %+v", rep)
	}
	checks := []struct {
		name      string
		got, want float64
	}{
		{"stop_s", float64(rep.StopS), 10},
		{"block_s", float64(rep.BlockS), twinEnd},
		{"saved_s", float64(rep.SavedS), twinEnd - 10},
		{"saved_fraction", float64(rep.SavedFraction), (twinEnd - 10) / twinEnd},
	}
	for _, c := range checks {
		if !near(c.got, c.want, 1e-9) {
			t.Errorf("%s = %v, want %v", c.name, c.got, c.want)
		}
	}
	e := unitScore(t, rep, "early")
	if e.SpikesAtStop != int64(early) || e.SpikesFull != int64(2*early) {
		t.Errorf("early spikes %d at the stop, %d in full; want %d and %d", e.SpikesAtStop, e.SpikesFull, early, 2*early)
	}
	if !near(float64(e.STA), 1, 1e-12) {
		t.Errorf("early STA correlation %v, want 1", e.STA)
	}
	if r := float64(e.Ridge); !(r > 0.5 && r <= 1) {
		t.Errorf("early ridge correlation %v, want a value in (0.5, 1]", r)
	}
	l := unitScore(t, rep, "late")
	if l.SpikesAtStop != 0 || l.SpikesFull != int64(late) || !math.IsNaN(float64(l.Ridge)) || !math.IsNaN(float64(l.STA)) {
		t.Errorf("late: %+v, want no estimate at the stop and %d spikes in full", l, late)
	}
	if c := unitScore(t, rep, "clock"); c.SpikesFull != 0 {
		t.Errorf("clock: %d binned spikes, want 0", c.SpikesFull)
	}
	if rep.Overall.Units != 3 || rep.Overall.Scored != 1 || !near(float64(rep.Overall.MeanRidge), float64(e.Ridge), 0) {
		t.Errorf("overall %+v", rep.Overall)
	}
	if !math.IsNaN(float64(rep.RuleStopS)) && !near(float64(rep.LeadS), float64(rep.RuleStopS)-10, 1e-9) {
		t.Errorf("lead %v with the rule at %v", rep.LeadS, rep.RuleStopS)
	}
	if b, err := json.Marshal(rep); err != nil || !strings.Contains(string(b), `"sta_correlation":null`) {
		t.Errorf("report JSON (err %v) should carry null for undefined correlations: %s", err, b)
	}
}

// TestPracticeNoStop: a trainee who never stops saves nothing and every
// estimate correlates 1 with itself.
func TestPracticeNoStop(t *testing.T) {
	rep, p, _, _ := runPractice(t, time.Hour)
	if rep.Stopped || float64(rep.SavedS) != 0 || float64(rep.StopS) != twinEnd {
		t.Errorf("stopped %v at %v, saved %v; want not stopped, %v, 0", rep.Stopped, rep.StopS, rep.SavedS, twinEnd)
	}
	for _, id := range []string{"early", "late"} {
		if u := unitScore(t, rep, id); !near(float64(u.Ridge), 1, 1e-12) || !near(float64(u.STA), 1, 1e-12) {
			t.Errorf("%s correlations %v, %v; want 1", id, u.Ridge, u.STA)
		}
	}
	// The endpoints serve the finished report.
	srv := httptest.NewServer(display.PracticeHandler(p, ""))
	defer srv.Close()
	resp, err := http.Get(srv.URL + "/api/practice/report")
	if err != nil {
		t.Fatal(err)
	}
	var got Report
	err = json.NewDecoder(resp.Body).Decode(&got)
	resp.Body.Close()
	if err != nil || got.State != PracticeDone || got.Block != "T1" || len(got.Units) != 3 {
		t.Errorf("GET report: %v %+v", err, got)
	}
	resp, err = http.Post(srv.URL+"/api/practice/stop", "application/json", nil)
	if err != nil {
		t.Fatal(err)
	}
	resp.Body.Close()
	if resp.StatusCode != http.StatusAccepted {
		t.Errorf("POST stop: %s", resp.Status)
	}
}
