package display

import (
	"bytes"
	"context"
	"fmt"
	"image/color"
	"image/png"
	"math"
	"net/http"
	"net/http/httptest"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/chromedp/cdproto/page"
	"github.com/chromedp/chromedp"

	"livefield/online"
)

const chromiumPath = "/usr/bin/chromium"

// newBrowser starts a headless Chromium for the test, or skips when there
// is none (fails instead when LIVEFIELD_REQUIRE_BROWSER=1, as in CI).
func newBrowser(t *testing.T) context.Context {
	t.Helper()
	return newBrowserSized(t, 1400, 1000)
}

// newBrowserSized is newBrowser with a window of width×height.
func newBrowserSized(t *testing.T, width, height int) context.Context {
	t.Helper()
	if _, err := os.Stat(chromiumPath); err != nil {
		if os.Getenv("LIVEFIELD_REQUIRE_BROWSER") == "1" {
			t.Fatalf("display: LIVEFIELD_REQUIRE_BROWSER=1 but no browser at %s: %v", chromiumPath, err)
		}
		t.Skipf("display: no browser at %s (install Debian's chromium to run the page tests)", chromiumPath)
	}
	opts := []chromedp.ExecAllocatorOption{
		chromedp.ExecPath(chromiumPath),
		chromedp.Headless,
		chromedp.NoSandbox,
		chromedp.DisableGPU,
		chromedp.NoFirstRun,
		chromedp.NoDefaultBrowserCheck,
		chromedp.Flag("disable-quic", true),
		chromedp.Flag("disable-background-networking", true),
		chromedp.Flag("disable-component-update", true),
		chromedp.Flag("disable-sync", true),
		chromedp.Flag("disable-extensions", true),
		chromedp.UserDataDir(t.TempDir()),
		chromedp.WindowSize(width, height),
	}
	ctx, cancel := context.WithTimeout(context.Background(), 60*time.Second)
	actx, acancel := chromedp.NewExecAllocator(ctx, opts...)
	bctx, bcancel := chromedp.NewContext(actx)
	t.Cleanup(func() { bcancel(); acancel(); cancel() })
	if err := chromedp.Do(bctx); err != nil {
		t.Fatalf("display: starting %s: %v", chromiumPath, err)
	}
	return bctx
}

// pageErrors collects uncaught exceptions and console.error calls.
type pageErrors struct {
	mu   sync.Mutex
	errs []string
}

func (p *pageErrors) add(s string) {
	p.mu.Lock()
	p.errs = append(p.errs, s)
	p.mu.Unlock()
}

func (p *pageErrors) list() []string {
	p.mu.Lock()
	defer p.mu.Unlock()
	return append([]string(nil), p.errs...)
}

// screenshotTo keeps a screenshot when LIVEFIELD_SCREENSHOTS names a
// directory, to look at the page by eye.
func screenshotTo(t *testing.T, name string, b []byte) {
	if dir := os.Getenv("LIVEFIELD_SCREENSHOTS"); dir != "" {
		if err := os.WriteFile(filepath.Join(dir, name), b, 0o644); err != nil {
			t.Log(err)
		}
	}
}

// tileExtremeJS returns [column, row, r, g, b] of the tile canvas pixel
// farthest from the colour scale's white, and the canvas size.
const tileExtremeJS = `(() => {
  const c = document.querySelector('.tile[data-id="%s"] canvas');
  if (!c) return null;
  const d = c.getContext('2d').getImageData(0, 0, c.width, c.height).data;
  const mid = [246, 244, 238]; // the middle of the colour scale (web/js/colour.js, DIVERGING[2])
  let best = -1, at = 0;
  for (let p = 0; p < c.width * c.height; p++) {
    const e = Math.abs(d[4*p] - mid[0]) + Math.abs(d[4*p+1] - mid[1]) + Math.abs(d[4*p+2] - mid[2]);
    if (e > best) { best = e; at = p; }
  }
  let distinct = new Set();
  for (let p = 0; p < c.width * c.height; p++) distinct.add(d[4*p] + ',' + d[4*p+1] + ',' + d[4*p+2]);
  return [at %% c.width, Math.floor(at / c.width), d[4*at], d[4*at+1], d[4*at+2], c.width, c.height, distinct.size];
})()`

func tileExtreme(t *testing.T, ctx context.Context, id string) (col, row int, px color.RGBA, w, h, colours int) {
	t.Helper()
	v, err := chromedp.Run(ctx, chromedp.Evaluate[[]float64](fmt.Sprintf(tileExtremeJS, id)))
	if err != nil {
		t.Fatalf("reading tile %s: %v", id, err)
	}
	if len(v) != 8 {
		t.Fatalf("tile %s: no canvas (%v)", id, v)
	}
	return int(v[0]), int(v[1]), color.RGBA{uint8(v[2]), uint8(v[3]), uint8(v[4]), 255}, int(v[5]), int(v[6]), int(v[7])
}

func text(t *testing.T, ctx context.Context, sel string) string {
	t.Helper()
	s, err := chromedp.Run(ctx, chromedp.TextContent(chromedp.CSS(sel)))
	if err != nil {
		t.Fatalf("text of %s: %v", sel, err)
	}
	return strings.TrimSpace(s)
}

// eventually polls a JavaScript condition in the page until it holds.
func eventually(t *testing.T, ctx context.Context, what, js string) {
	t.Helper()
	deadline := time.Now().Add(15 * time.Second)
	for {
		ok, err := chromedp.Run(ctx, chromedp.Evaluate[bool](js))
		if err != nil {
			t.Fatalf("%s: %v", what, err)
		}
		if ok {
			return
		}
		if time.Now().After(deadline) {
			t.Fatalf("timed out waiting for %s (%s)", what, js)
		}
		time.Sleep(20 * time.Millisecond)
	}
}

func TestBrowserPage(t *testing.T) {
	first := simulated(t)
	ctx := newBrowser(t)

	const token = "tab-token"
	src := &rigSource{snap: first}
	src.reset = func() *online.Snapshot { simState.m.Reset(); return simState.m.Update() }
	src.flag = func(id string, on bool) { simState.m.FlagSTC(id, on) }
	srv := startPage(t, src, Options{Token: token, Poll: 20 * time.Millisecond})

	// Exceptions, console.error and browser-log errors (failed loads) count.
	var errs pageErrors
	messages := chromedp.Console(ctx)
	go func() {
		for m, err := range messages {
			if err != nil {
				return
			}
			if m.Type == chromedp.ConsoleError || m.IsException() {
				errs.add(m.String())
			}
		}
	}()
	// The reset button asks for confirmation: answer yes, and note the question.
	var dialogs []string
	var dmu sync.Mutex
	opened := chromedp.Events(ctx, page.JavascriptDialogOpening)
	go func() {
		for ev, err := range opened {
			if err != nil {
				return
			}
			dmu.Lock()
			dialogs = append(dialogs, ev.Message)
			dmu.Unlock()
			if _, err := chromedp.Call(ctx, page.HandleJavaScriptDialog, page.HandleJavaScriptDialogParams{Accept: true}); err != nil {
				errs.add("closing the dialog: " + err.Error())
			}
		}
	}()

	if err := chromedp.Do(ctx,
		chromedp.Navigate(srv.URL+"/?token="+token),
		chromedp.WaitVisible(chromedp.CSS(`.tile[data-id="12"]`)),
	); err != nil {
		t.Fatalf("loading the page: %v", err)
	}

	t.Run("tiles in natural order", func(t *testing.T) {
		ids, err := chromedp.Run(ctx, chromedp.Evaluate[[]string](`[...document.querySelectorAll('.tile')].map(e => e.dataset.id)`))
		if err != nil {
			t.Fatal(err)
		}
		if strings.Join(ids, ",") != "3,7,12" {
			t.Fatalf("tiles %v, want 3,7,12", ids)
		}
		if got := text(t, ctx, "#link"); got != "live" {
			t.Errorf("connection badge %q, want live", got)
		}
	})

	t.Run("tile shows the field at its place", func(t *testing.T) {
		for _, c := range simCells {
			if c.fieldless {
				continue
			}
			col, row, px, w, h, _ := tileExtreme(t, ctx, c.id)
			if w != simWidth || h != simHeight {
				t.Fatalf("unit %s: canvas %d×%d, want %d×%d", c.id, w, h, simWidth, simHeight)
			}
			if !near(col, row, c.x, c.y) {
				t.Errorf("unit %s: strongest pixel at (%d, %d), field centred at (%v, %v)", c.id, col, row, c.x, c.y)
			}
			if warm := px.R > px.B; warm != c.on {
				t.Errorf("unit %s: peak colour %v on the wrong side of the scale", c.id, px)
			}
		}
	})

	t.Run("tile shows the reliability its status comes from", func(t *testing.T) {
		// The server's rule (online.Mapper.applyPrior): the status comes
		// from the estimate named in Estimate; the tile shows that
		// estimate's reliability, to two decimals, and names it.
		fromPrior := 0
		for _, u := range first.Units {
			want, from := float64(u.Reliability), online.EstimateRidge
			if u.Estimate == online.EstimatePrior {
				want, from = float64(u.PriorReliability), online.EstimatePrior
				fromPrior++
			}
			got := text(t, ctx, `.tile[data-id="`+u.ID+`"] .rel`)
			fields := strings.Fields(got) // "r 0.93 prior" (large tiles)
			if len(fields) < 2 || fields[0] != "r" {
				t.Fatalf("unit %s: tile reliability %q", u.ID, got)
			}
			v, err := strconv.ParseFloat(fields[1], 64)
			if math.IsNaN(want) {
				if fields[1] != "—" {
					t.Errorf("unit %s: tile reliability %q, want — (none yet)", u.ID, got)
				}
			} else if err != nil || math.Abs(v-want) > 0.0051 {
				t.Errorf("unit %s (status from %q): tile reliability %q, want %.4f", u.ID, u.Estimate, got, want)
			}
			if mark := strings.Join(fields[2:], " "); u.Estimate != "" && mark != from || u.Estimate == "" && mark != "" {
				t.Errorf("unit %s (status from %q): tile marks %q", u.ID, u.Estimate, mark)
			}
		}
		t.Logf("%d of %d units with the status from the prior", fromPrior, len(first.Units))
	})

	t.Run("screenshot is not blank", func(t *testing.T) {
		shot, err := chromedp.Run(ctx, chromedp.CaptureScreenshot())
		if err != nil {
			t.Fatal(err)
		}
		screenshotTo(t, "overview.png", shot)
		img, err := png.Decode(bytes.NewReader(shot))
		if err != nil {
			t.Fatal(err)
		}
		var sum, sq float64
		n := 0
		b := img.Bounds()
		for y := b.Min.Y; y < b.Max.Y; y += 3 {
			for x := b.Min.X; x < b.Max.X; x += 3 {
				c := color.GrayModel.Convert(img.At(x, y)).(color.Gray)
				sum += float64(c.Y)
				sq += float64(c.Y) * float64(c.Y)
				n++
			}
		}
		mean := sum / float64(n)
		if sd := math.Sqrt(sq/float64(n) - mean*mean); sd < 10 {
			t.Fatalf("screenshot grey-level SD %.1f: the page looks blank", sd)
		}
	})

	t.Run("rig strip shows the link to the rig", func(t *testing.T) {
		eventually(t, ctx, "the rig strip", `document.getElementById('rig').textContent.includes('NATS reconnecting')`)
		got := text(t, ctx, "#rig")
		for _, want := range []string{"NATS reconnecting", "messages sent during a disconnect are lost", "3 late spikes", "3 messages refused",
			"update takes 0.72 s of its 1 s"} {
			if !strings.Contains(got, want) {
				t.Errorf("rig strip %q lacks %q", got, want)
			}
		}
	})

	t.Run("clock follows the updates", func(t *testing.T) {
		before := text(t, ctx, "#clock")
		if want := clockText(float64(first.T)); before != want {
			t.Errorf("clock %q, want %q for t=%v s", before, want, first.T)
		}
		// The next second's snapshot. (A real second Update folds the new
		// bins into the ridge estimate, which takes seconds under the race
		// detector; the page only needs a later snapshot.)
		next := *first
		next.T += 5
		next.Bins += 300
		later := &next
		src.set(later)
		want := clockText(float64(later.T))
		if want == before {
			t.Fatalf("the second snapshot (t=%v) shows the same clock", later.T)
		}
		eventually(t, ctx, "the clock to change", fmt.Sprintf(`document.getElementById('clock').textContent === %q`, want))
	})

	t.Run("click opens the detail", func(t *testing.T) {
		if err := chromedp.Do(ctx,
			chromedp.Click(chromedp.CSS(`.tile[data-id="12"]`)),
			chromedp.WaitVisible(chromedp.ID("d-body")),
		); err != nil {
			t.Fatal(err)
		}
		defer func() {
			if err := chromedp.Do(ctx, chromedp.Click(chromedp.ID("d-close")), chromedp.WaitNotVisible(chromedp.ID("detail"))); err != nil {
				t.Error(err)
			}
		}()
		if got := text(t, ctx, "#d-id"); got != "unit 12" {
			t.Errorf("detail title %q", got)
		}
		lags, err := chromedp.Run(ctx, chromedp.Evaluate[int](`document.querySelectorAll('#d-lags canvas').length`))
		if err != nil {
			t.Fatal(err)
		}
		if lags != simLags {
			t.Errorf("lag strip has %d maps, want %d", lags, simLags)
		}
		href, err := chromedp.Run(ctx, chromedp.Evaluate[string](`document.getElementById('export-png').getAttribute('href')`))
		if err != nil {
			t.Fatal(err)
		}
		if href != "export/units/12.png?token="+token {
			t.Errorf("picture export while the detail is open: %q", href)
		}
		if shot, err := chromedp.Run(ctx, chromedp.CaptureScreenshot()); err == nil {
			screenshotTo(t, "detail.png", shot)
		}
		if err := chromedp.Do(ctx, chromedp.Click(chromedp.ID("d-stc"))); err != nil {
			t.Fatal(err)
		}
		eventually(t, ctx, "the STC notice", `document.getElementById('notice').textContent.includes('STC requested')`)
		src.mu.Lock()
		on := src.flags["12"]
		src.mu.Unlock()
		if !on {
			t.Fatal("the STC button did not flag unit 12 at the source")
		}
	})

	t.Run("prior toggle shows the smooth-local estimate", func(t *testing.T) {
		d, _ := first.Detail("12")
		if d.Prior == nil {
			t.Fatal("the fixture's unit 12 has no smooth-local estimate")
		}
		if err := chromedp.Do(ctx,
			chromedp.Click(chromedp.CSS(`.tile[data-id="12"]`)),
			chromedp.WaitVisible(chromedp.ID("d-body")),
			chromedp.Click(chromedp.CSS(`button.kind[data-kind="prior"]`)),
		); err != nil {
			t.Fatal(err)
		}
		defer func() {
			if err := chromedp.Do(ctx, chromedp.Click(chromedp.CSS(`button.kind[data-kind="ridge"]`))); err != nil {
				t.Error(err)
			}
			eventually(t, ctx, "the separable fit's key back with the ridge", `!document.getElementById('d-sepkey').hidden`)
			if err := chromedp.Do(ctx, chromedp.Click(chromedp.ID("d-close")), chromedp.WaitNotVisible(chromedp.ID("detail"))); err != nil {
				t.Error(err)
			}
		}()
		eventually(t, ctx, "the prior caption", `document.getElementById('d-mapcap').textContent.startsWith('Prior at the peak lag')`)
		// The separable fit is of the ridge weights: on another estimate's
		// scale it is not drawn, nor named in the key.
		eventually(t, ctx, "the separable fit's key hidden", `document.getElementById('d-sepkey').hidden`)
		if !strings.Contains(mustURL(t, ctx), "kind=prior") {
			t.Errorf("the URL does not keep the prior toggle: %s", mustURL(t, ctx))
		}
		facts := text(t, ctx, "#d-facts")
		if !strings.Contains(facts, "status from the") || !strings.Contains(facts, "prior reliability") {
			t.Errorf("detail facts %q do not name the estimate of the status and the prior's reliability", facts)
		}
		// The lag strip draws the prior: at the peak lag its strongest
		// pixel sits on the field (no estimate would leave it flat).
		v, err := chromedp.Run(ctx, chromedp.Evaluate[[]float64](`(() => {
  const c = document.querySelectorAll('#d-lags canvas')[`+strconv.Itoa(d.Features.PeakLag)+`];
  const d = c.getContext('2d').getImageData(0, 0, c.width, c.height).data;
  const mid = [246, 244, 238];
  let best = -1, at = 0;
  for (let p = 0; p < c.width * c.height; p++) {
    const e = Math.abs(d[4*p] - mid[0]) + Math.abs(d[4*p+1] - mid[1]) + Math.abs(d[4*p+2] - mid[2]);
    if (e > best) { best = e; at = p; }
  }
  const far = 4 * (c.width - 1); // the top-right pixel, far outside the prior's window
  return [at % c.width / c.width, Math.floor(at / c.width) / c.height, best,
    Math.abs(d[far] - mid[0]) + Math.abs(d[far+1] - mid[1]) + Math.abs(d[far+2] - mid[2])];
})()`))
		if err != nil {
			t.Fatal(err)
		}
		c := strongCell
		col, row := int(v[0]*simWidth), int(v[1]*simHeight)
		if v[2] < 30 || !near(col, row, c.x, c.y) {
			t.Errorf("prior map's strongest pixel at (%d, %d) (contrast %v), field of unit 12 centred at (%v, %v)", col, row, v[2], c.x, c.y)
		}
		// Outside its window the prior is zero: the scale's middle colour
		// exactly, where the ridge and the STA show noise.
		if v[3] != 0 {
			t.Errorf("the top-right pixel of the prior's map is %v away from the scale's middle: not the prior", v[3])
		}
		if shot, err := chromedp.Run(ctx, chromedp.CaptureScreenshot()); err == nil {
			screenshotTo(t, "detail-prior.png", shot)
		}
	})

	t.Run("criterion", func(t *testing.T) {
		if err := chromedp.Do(ctx,
			chromedp.SetValue(chromedp.ID("target"), "0.85"),
			chromedp.SetValue(chromedp.ID("fraction"), "0.6"),
			chromedp.Click(chromedp.ID("apply")),
		); err != nil {
			t.Fatal(err)
		}
		eventually(t, ctx, "the criterion notice", `document.getElementById('notice').textContent.startsWith('Target set')`)
		src.mu.Lock()
		target, fraction := src.target, src.fraction
		src.mu.Unlock()
		if target != 0.85 || fraction != 0.6 {
			t.Errorf("source criterion %v, %v; want 0.85, 0.6", target, fraction)
		}
	})

	t.Run("reset clears the estimates", func(t *testing.T) {
		if err := chromedp.Do(ctx, chromedp.Click(chromedp.ID("reset"))); err != nil {
			t.Fatal(err)
		}
		eventually(t, ctx, "every tile collecting",
			`[...document.querySelectorAll('.tile .badge')].every(b => b.textContent === 'collecting')`)
		if n := src.resetCount(); n != 1 {
			t.Fatalf("source saw %d resets, want 1", n)
		}
		dmu.Lock()
		asked := len(dialogs) == 1 && strings.Contains(dialogs[0], "electrode")
		dmu.Unlock()
		if !asked {
			t.Errorf("reset did not ask for confirmation: dialogs %q", dialogs)
		}
		_, _, _, _, _, colours := tileExtreme(t, ctx, strongCell.id)
		if colours != 1 {
			t.Errorf("after the reset the tile of unit %s still shows %d colours, want one flat colour", strongCell.id, colours)
		}
	})

	if e := errs.list(); len(e) > 0 {
		t.Errorf("the page reported errors:\n%s", strings.Join(e, "\n"))
	}
}

// clockText is the page's m:ss rendering of a block clock.
func clockText(seconds float64) string {
	s := int(seconds)
	if s >= 3600 {
		return fmt.Sprintf("%d:%02d:%02d", s/3600, s%3600/60, s%60)
	}
	return fmt.Sprintf("%d:%02d", s/60, s%60)
}

// practiceReport is what `livefield practice` serves at
// /api/practice/report once the block is scored (numbers made up for the
// page test: 30 s block stopped at 13 s).
const practiceReport = `{"state":"done","block":"B1","stopped":true,"stop_s":13.8,"block_s":30,"saved_s":16.2,
"saved_fraction":0.54,"ready_at_stop":false,"eta_at_stop_s":null,"rule_stop_s":null,"rule_saved_s":null,"lead_s":null,
"units":[{"id":"7","spikes_at_stop":82,"spikes_full":160,"status_at_stop":"collecting","status_full":"emerging",
"reliability_at_stop":0.2,"reliability_full":0.5,"ridge_correlation":0.52,"sta_correlation":0.65,"ridge_correlation_at_rule":null}],
"overall":{"units":1,"scored":1,"mean_ridge_correlation":0.52,"min_ridge_correlation":0.52,"mean_sta_correlation":0.65,
"mean_ridge_correlation_at_rule":null,"reliable_at_stop":0,"reliable_full":0},"summary":"block B1: stopped at 13.8 s of 30.0 s"}`

// In practice the page offers a Stop button that posts to the practice
// endpoint, then shows the score.
func TestBrowserPractice(t *testing.T) {
	ctx := newBrowser(t)
	src := &rigSource{snap: simulated(t)}
	s := NewServer(src, Options{Poll: 20 * time.Millisecond})
	rctx, stop := context.WithCancel(context.Background())
	done := make(chan struct{})
	go func() { s.Run(rctx); close(done) }()
	var mu sync.Mutex
	stopped := false
	mux := http.NewServeMux()
	mux.HandleFunc("POST /api/practice/stop", func(w http.ResponseWriter, _ *http.Request) {
		mu.Lock()
		stopped = true
		mu.Unlock()
		w.WriteHeader(http.StatusAccepted)
	})
	mux.HandleFunc("GET /api/practice/report", func(w http.ResponseWriter, _ *http.Request) {
		mu.Lock()
		defer mu.Unlock()
		w.Header().Set("Content-Type", "application/json")
		if !stopped {
			fmt.Fprint(w, `{"state":"running"}`)
			return
		}
		fmt.Fprint(w, practiceReport)
	})
	mux.Handle("/", s)
	srv := httptest.NewServer(mux)
	t.Cleanup(func() { stop(); <-done; srv.Close() })

	if err := chromedp.Do(ctx,
		chromedp.Navigate(srv.URL+"/?practice=1"),
		chromedp.WaitVisible(chromedp.ID("p-stop")),
		chromedp.Click(chromedp.ID("p-stop")),
		chromedp.WaitVisible(chromedp.ID("p-score")),
	); err != nil {
		t.Fatalf("practice page: %v", err)
	}
	for sel, want := range map[string]string{"#p-stop-s": "0:13", "#p-block-s": "0:30", "#p-saved": "0:16 (54 %)", "#p-mean": "0.52", "#p-rule": "never"} {
		if got := text(t, ctx, sel); got != want {
			t.Errorf("%s = %q, want %q", sel, got, want)
		}
	}
	if got := text(t, ctx, "#p-units tbody"); !strings.Contains(got, "7") || !strings.Contains(got, "0.65") {
		t.Errorf("unit table %q lacks unit 7 and its STA correlation", got)
	}
}

// mustURL is the page's current address.
func mustURL(t *testing.T, ctx context.Context) string {
	t.Helper()
	u, err := chromedp.Run(ctx, chromedp.Evaluate[string](`location.href`))
	if err != nil {
		t.Fatal(err)
	}
	return u
}
