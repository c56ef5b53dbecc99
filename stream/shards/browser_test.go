package shards

import (
	"context"
	"fmt"
	"net/http/httptest"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/chromedp/chromedp"

	"livefield/stream/ingest"
	"livefield/stream/natstest"
)

const chromiumPath = "/usr/bin/chromium"

// newBrowser starts a headless Chromium for the test, or skips when there is
// none (fails instead when LIVEFIELD_REQUIRE_BROWSER=1, as in CI).
func newBrowser(t *testing.T) context.Context {
	t.Helper()
	if _, err := os.Stat(chromiumPath); err != nil {
		if os.Getenv("LIVEFIELD_REQUIRE_BROWSER") == "1" {
			t.Fatalf("LIVEFIELD_REQUIRE_BROWSER=1 but no browser at %s: %v", chromiumPath, err)
		}
		t.Skipf("no browser at %s (install Debian's chromium to run the page tests)", chromiumPath)
	}
	opts := []chromedp.ExecAllocatorOption{
		chromedp.ExecPath(chromiumPath), chromedp.Headless, chromedp.NoSandbox, chromedp.DisableGPU,
		chromedp.NoFirstRun, chromedp.NoDefaultBrowserCheck,
		chromedp.Flag("disable-background-networking", true), chromedp.Flag("disable-extensions", true),
		chromedp.UserDataDir(t.TempDir()), chromedp.WindowSize(1400, 900),
	}
	ctx, cancel := context.WithTimeout(context.Background(), 90*time.Second)
	actx, acancel := chromedp.NewExecAllocator(ctx, opts...)
	bctx, bcancel := chromedp.NewContext(actx)
	t.Cleanup(func() { bcancel(); acancel(); cancel() })
	if err := chromedp.Do(bctx); err != nil {
		t.Fatalf("starting %s: %v", chromiumPath, err)
	}
	return bctx
}

// waitJS polls a JavaScript condition in the page until it holds.
func waitJS(t *testing.T, ctx context.Context, what, cond string) {
	t.Helper()
	deadline := time.Now().Add(30 * time.Second)
	for {
		if ok, err := chromedp.Run(ctx, chromedp.Evaluate[bool](cond)); err == nil && ok {
			return
		}
		if time.Now().After(deadline) {
			body, _ := chromedp.Run(ctx, chromedp.Evaluate[string](`document.body.innerText.slice(0, 2000)`))
			t.Fatalf("not within 30 s: %s\npage text:\n%s", what, body)
		}
		time.Sleep(100 * time.Millisecond)
	}
}

// screenshot writes the page to the test's log directory (LIVEFIELD_SCREENSHOTS
// when set) for review.
func screenshot(t *testing.T, ctx context.Context, name string) {
	t.Helper()
	png, err := chromedp.Run(ctx, chromedp.CaptureScreenshot())
	if err != nil {
		t.Fatal(err)
	}
	dir := os.Getenv("LIVEFIELD_SCREENSHOTS")
	if dir == "" {
		dir = t.TempDir()
	}
	path := filepath.Join(dir, name)
	if err := os.WriteFile(path, png, 0o644); err != nil {
		t.Fatal(err)
	}
	t.Logf("screenshot: %s (%d bytes)", path, len(png))
}

// TestMergedPageInBrowser: two shard workers of one rig and the merged page
// in headless Chromium: every unit of both shards as a tile, a unit of the
// second shard opened in the detail (its estimate fetched from its shard),
// STC asked for from the page reaching that shard, and the shard shown
// missing on the page when its worker goes away.
func TestMergedPageInBrowser(t *testing.T) {
	ctx := newBrowser(t)
	srv := natstest.Start(t, natstest.Options{})
	recs := running(t, records(t))
	const rig = "web1"
	w0 := startWorker(t, srv.Connect(t), rig, ingest.Shard{Index: 0, Count: 2}, ingest.Options{})
	w1 := startWorker(t, srv.Connect(t), rig, ingest.Shard{Index: 1, Count: 2}, ingest.Options{})
	publishCore(t, srv.Connect(t), "livefield."+rig, recs)
	s0, s1 := settle(t, w0.rig, uint64(len(recs))), settle(t, w1.rig, uint64(len(recs)))
	total := len(s0.Units) + len(s1.Units)

	front := NewFront(srv.Connect(t), FrontOptions{View: ViewOptions{Poll: 250 * time.Millisecond, DiscoverWait: 100 * time.Millisecond, Timeout: 10 * time.Second}})
	fctx, cancel := context.WithCancel(context.Background())
	done := make(chan struct{})
	go func() { front.Run(fctx); close(done) }()
	defer func() { cancel(); <-done }()
	ts := httptest.NewServer(front)
	defer ts.Close()
	eventually(t, 10*time.Second, "the front finds the rig", func() bool { return len(front.Rigs()) == 1 })

	// One rig: / leads to its page.
	if err := chromedp.Do(ctx, chromedp.Navigate(ts.URL+"/")); err != nil {
		t.Fatal(err)
	}
	waitJS(t, ctx, fmt.Sprintf("%d tiles", total), fmt.Sprintf(`document.querySelectorAll('#tiles .tile').length === %d && location.pathname === '/rigs/%s/'`, total, rig))
	for _, u := range append(append(s0.Units[:0:0], s0.Units...), s1.Units...) {
		waitJS(t, ctx, "tile "+u.ID, fmt.Sprintf(`!!document.querySelector('.tile[data-id=%q]')`, u.ID))
	}
	waitJS(t, ctx, "the rig strip names both shards", `document.getElementById('rig').textContent.includes('shard 0/2 + 1/2')`)

	// A unit of shard 1/2 in the detail: its full estimate comes over the
	// websocket once the view has fetched it from the shard.
	id := s1.Units[0].ID
	if err := chromedp.Do(ctx, chromedp.Navigate(ts.URL+"/rigs/"+rig+"/?unit="+id), chromedp.WaitVisible(chromedp.ID("d-body"))); err != nil {
		t.Fatal(err)
	}
	waitJS(t, ctx, "the detail of "+id, fmt.Sprintf(`document.getElementById('d-id').textContent.includes(%q)`, id))
	if err := chromedp.Do(ctx, chromedp.Click(chromedp.ID("d-stc"))); err != nil {
		t.Fatal(err)
	}
	eventually(t, time.Minute, "shard 1/2 gets the STC request", func() bool {
		d, ok := w1.rig.Sync().Detail(id)
		return ok && d.Flagged
	})
	screenshot(t, ctx, "merged-page.png")

	if err := chromedp.Do(ctx, chromedp.Click(chromedp.ID("d-close")), chromedp.WaitNotVisible(chromedp.ID("detail"))); err != nil {
		t.Fatal(err)
	}

	// Shard 1/2 goes away: the page says so and keeps its units.
	if err := w1.svc.Stop(); err != nil {
		t.Fatal(err)
	}
	start := time.Now()
	waitJS(t, ctx, "the page shows shard 1/2 missing", `document.getElementById('rig').textContent.includes('shard 1/2 missing')`)
	t.Logf("the page showed the shard missing %v after it went away (view poll 250 ms, page health poll 2 s)", time.Since(start).Round(time.Millisecond))
	if tiles, err := chromedp.Run(ctx, chromedp.Evaluate[int](`document.querySelectorAll('#tiles .tile').length`)); err != nil || tiles != total {
		t.Errorf("with a shard missing the page shows %d tiles, want %d (%v)", tiles, total, err)
	}
	if ready, err := chromedp.Run(ctx, chromedp.Evaluate[bool](`!document.getElementById('ready').hidden`)); err != nil || ready {
		t.Errorf("READY shown with a shard missing (%v)", err)
	}
	screenshot(t, ctx, "merged-page-shard-missing.png")
	text, _ := chromedp.Run(ctx, chromedp.Evaluate[string](`document.getElementById('rig').textContent`))
	if !strings.Contains(text, "READY waits for every shard") {
		t.Errorf("rig strip %q", text)
	}

	// A second rig announces itself: / becomes the rig selector, and its
	// link opens that rig's own page.
	other, err := Announce(srv.Connect(t), fakeWorker{s0}, Info{Rig: "web2", Prefix: "livefield.web2", Shard: ingest.Shard{}})
	if err != nil {
		t.Fatal(err)
	}
	defer other.Stop()
	eventually(t, 10*time.Second, "the front finds the second rig", func() bool { return len(front.Rigs()) == 2 })
	if err := chromedp.Do(ctx, chromedp.Navigate(ts.URL+"/")); err != nil {
		t.Fatal(err)
	}
	waitJS(t, ctx, "the rig selector lists both rigs", `document.querySelectorAll('#rigs tr.rig').length === 2`)
	screenshot(t, ctx, "rig-selector.png")
	if err := chromedp.Do(ctx, chromedp.Click(chromedp.CSS(`#rigs a[href^="rigs/web2/"]`))); err != nil {
		t.Fatal(err)
	}
	waitJS(t, ctx, "rig web2's page with its own units", fmt.Sprintf(`location.pathname === '/rigs/web2/' && document.querySelectorAll('#tiles .tile').length === %d`, len(s0.Units)))
}
