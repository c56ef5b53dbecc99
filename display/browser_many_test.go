package display

import (
	"context"
	"fmt"
	"math"
	"net/url"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/chromedp/chromedp"
	"github.com/chromedp/chromedp/kb"

	"livefield/online"
)

func evaluate[T any](t *testing.T, ctx context.Context, js string) T {
	t.Helper()
	v, err := chromedp.Run(ctx, chromedp.Evaluate[T](js, chromedp.EvalAwaitPromise))
	if err != nil {
		t.Fatalf("evaluating %.80s: %v", js, err)
	}
	return v
}

func shoot(t *testing.T, ctx context.Context, name string) {
	t.Helper()
	if shot, err := chromedp.Run(ctx, chromedp.CaptureScreenshot()); err == nil {
		screenshotTo(t, name, shot)
	} else {
		t.Errorf("screenshot %s: %v", name, err)
	}
}

const tileIDsJS = `[...document.querySelectorAll('#tiles .tile')].map(e => e.dataset.id)`

// pageQuery is the page's URL query as it stands.
func pageQuery(t *testing.T, ctx context.Context) url.Values {
	t.Helper()
	loc, err := chromedp.Run(ctx, chromedp.Location())
	if err != nil {
		t.Fatal(err)
	}
	u, err := url.Parse(loc)
	if err != nil {
		t.Fatal(err)
	}
	return u.Query()
}

// sent is a number as the page receives it: four significant digits
// (display/tiles.go, short), NaN for null.
func sent(v online.Float) float64 {
	x := float64(v)
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return math.NaN()
	}
	r, _ := strconv.ParseFloat(strconv.FormatFloat(x, 'g', 4, 64), 64)
	return r
}

// checkOrder reports the first pair of neighbouring tiles out of order:
// value decides (desc: largest first), undefined values last, ties by
// natural id.
func checkOrder(ids []string, value func(id string) float64, desc bool) error {
	for i := 1; i < len(ids); i++ {
		a, b := value(ids[i-1]), value(ids[i])
		switch {
		case math.IsNaN(a) && math.IsNaN(b), a == b:
			if naturalCompare(ids[i-1], ids[i]) > 0 {
				return fmt.Errorf("tiles %d, %d (%s, %s): equal values %v not in natural id order", i-1, i, ids[i-1], ids[i], a)
			}
		case math.IsNaN(a):
			return fmt.Errorf("tile %d (%s): undefined value before a defined one", i-1, ids[i-1])
		case math.IsNaN(b):
		case desc && a < b, !desc && a > b:
			return fmt.Errorf("tiles %d, %d (%s %v, %s %v) out of order (desc %v)", i-1, i, ids[i-1], a, ids[i], b, desc)
		}
	}
	return nil
}

// The page at 384 units (issue 12 item 1): a compact grid by default that
// fits in about two screens, densities, sorting, filters, links that
// reproduce the view, and the keyboard in the detail.
func TestBrowserManyUnits(t *testing.T) {
	snap, mapper, _ := population(t)
	ctx := newBrowserSized(t, 1400, 900)
	const token = "probe-token"
	src := &rigSource{snap: snap}
	src.flag = func(id string, on bool) { mapper.FlagSTC(id, on) }
	srv := startPage(t, src, Options{Token: token, Poll: 50 * time.Millisecond})
	byID := map[string]online.UnitSummary{}
	statusCount := map[online.Status]int{}
	for _, u := range snap.Units {
		byID[u.ID] = u
		statusCount[u.Status]++
	}
	base := srv.URL + "/?token=" + token
	if err := chromedp.Do(ctx, chromedp.Navigate(base), chromedp.WaitVisible(chromedp.CSS(`#tiles .tile`))); err != nil {
		t.Fatalf("loading the page: %v", err)
	}
	eventually(t, ctx, "every tile", fmt.Sprintf(`document.querySelectorAll('#tiles .tile').length === %d`, popN))

	t.Run("compact grid fits in two screens", func(t *testing.T) {
		if cls := evaluate[string](t, ctx, `document.getElementById('tiles').className`); !strings.Contains(cls, "d-compact") {
			t.Fatalf("at %d units the automatic density is %q, want compact", popN, cls)
		}
		// The compact tiles carry no map: no pixel of it was sent.
		if painted := evaluate[int](t, ctx, `[...document.querySelectorAll('#tiles canvas')].filter(c => c.width > 0 && c.width !== 300).length`); painted != 0 {
			t.Errorf("%d compact tiles have a painted map", painted)
		}
		height := evaluate[float64](t, ctx, `document.documentElement.scrollHeight`)
		if screens := height / 900; screens > 2.1 {
			t.Errorf("the page is %.0f px high at %d units: %.1f screens of 900 px, want about two", height, popN, screens)
		}
		t.Logf("page height %.0f px = %.2f screens of 900 px", height, height/900)
		shoot(t, ctx, "many-compact.png")
	})

	t.Run("density", func(t *testing.T) {
		for _, tc := range []struct {
			density string
			side    int
		}{{"medium", popWidth / 2}, {"large", popWidth}} {
			if err := chromedp.Do(ctx, chromedp.Click(chromedp.CSS(`#densities [data-density="`+tc.density+`"]`))); err != nil {
				t.Fatal(err)
			}
			eventually(t, ctx, tc.density+" tiles", fmt.Sprintf(
				`document.getElementById('tiles').className.includes('d-%s') && document.querySelector('#tiles canvas').width === %d`, tc.density, tc.side))
			if got := pageQuery(t, ctx).Get("density"); got != tc.density {
				t.Errorf("URL density %q, want %q", got, tc.density)
			}
			// The readout names stimulus pixels, also where a map pixel
			// averages several: the pointer over the bottom-right map pixel.
			readout := evaluate[string](t, ctx, `(() => {
  const c = document.querySelector('#tiles canvas'), r = c.getBoundingClientRect();
  c.dispatchEvent(new MouseEvent('mousemove', {clientX: r.right - 1, clientY: r.bottom - 1, bubbles: true}));
  return document.getElementById('readout').textContent;
})()`)
			want := fmt.Sprintf("x %d  y %d  ", popWidth-1, popHeight-1)
			if tc.side < popWidth {
				want = fmt.Sprintf("x %d–%d  y %d–%d  ", popWidth-2, popWidth-1, popHeight-2, popHeight-1)
			}
			if !strings.HasPrefix(readout, want) {
				t.Errorf("%s tiles: readout %q, want it to start %q", tc.density, readout, want)
			}
			shoot(t, ctx, "many-"+tc.density+".png")
		}
		if err := chromedp.Do(ctx, chromedp.Click(chromedp.CSS(`#densities [data-density="auto"]`))); err != nil {
			t.Fatal(err)
		}
		eventually(t, ctx, "compact tiles again", `document.getElementById('tiles').className.includes('d-compact')`)
	})

	t.Run("sort", func(t *testing.T) {
		value := map[string]func(u online.UnitSummary) float64{
			"reliability":  func(u online.UnitSummary) float64 { return sent(u.Reliability) },
			"significance": func(u online.UnitSummary) float64 { return sent(u.Significance) },
			"eta":          func(u online.UnitSummary) float64 { return sent(u.ETA) },
			"status": func(u online.UnitSummary) float64 {
				return float64(slices.Index([]online.Status{online.Collecting, online.Emerging, online.Reliable, online.NoField}, u.Status))
			},
			"channel": func(u online.UnitSummary) float64 {
				n, _ := strconv.Atoi(strings.TrimPrefix(strings.Split(u.ID, ".")[0], "ch"))
				return float64(n)
			},
		}
		for _, tc := range []struct {
			key  string
			desc bool
		}{{"reliability", true}, {"significance", true}, {"eta", false}, {"status", false}, {"channel", false}} {
			evaluate[bool](t, ctx, fmt.Sprintf(`(() => { const s = document.getElementById('sort'); s.value = %q; s.dispatchEvent(new Event('change')); return true; })()`, tc.key))
			ids := evaluate[[]string](t, ctx, tileIDsJS)
			if len(ids) != popN {
				t.Fatalf("sort %s: %d tiles", tc.key, len(ids))
			}
			f := value[tc.key]
			if err := checkOrder(ids, func(id string) float64 { return f(byID[id]) }, tc.desc); err != nil {
				t.Errorf("sort by %s: %v", tc.key, err)
			}
			if got := pageQuery(t, ctx).Get("sort"); got != tc.key {
				t.Errorf("URL sort %q, want %q", got, tc.key)
			}
		}
		// The direction toggle reverses the order.
		if err := chromedp.Do(ctx, chromedp.Click(chromedp.ID("order"))); err != nil {
			t.Fatal(err)
		}
		ids := evaluate[[]string](t, ctx, tileIDsJS)
		f := value["channel"]
		if err := checkOrder(ids, func(id string) float64 { return f(byID[id]) }, true); err != nil {
			t.Errorf("channel, reversed: %v", err)
		}
		if q := pageQuery(t, ctx); q.Get("order") != "desc" {
			t.Errorf("URL order %q, want desc", q.Get("order"))
		}
		// Back to natural id order.
		evaluate[bool](t, ctx, `(() => { const s = document.getElementById('sort'); s.value = 'id'; s.dispatchEvent(new Event('change')); return true; })()`)
		ids = evaluate[[]string](t, ctx, tileIDsJS)
		if !slices.IsSortedFunc(ids, naturalCompare) {
			t.Errorf("sort by id: tiles not in natural order: %v…", ids[:8])
		}
	})

	t.Run("filter", func(t *testing.T) {
		if err := chromedp.Do(ctx, chromedp.Click(chromedp.CSS(`#statuses [data-status="reliable"]`))); err != nil {
			t.Fatal(err)
		}
		ids := evaluate[[]string](t, ctx, tileIDsJS)
		if len(ids) != statusCount[online.Reliable] {
			t.Fatalf("status filter: %d tiles, want the %d reliable units", len(ids), statusCount[online.Reliable])
		}
		for _, id := range ids {
			if byID[id].Status != online.Reliable {
				t.Fatalf("status filter shows %s, which is %s", id, byID[id].Status)
			}
		}
		// Ctrl-click adds a second state.
		evaluate[bool](t, ctx, `document.querySelector('#statuses [data-status="emerging"]').dispatchEvent(new MouseEvent('click', {ctrlKey: true, bubbles: true}))`)
		if n := len(evaluate[[]string](t, ctx, tileIDsJS)); n != statusCount[online.Reliable]+statusCount[online.Emerging] {
			t.Errorf("two states: %d tiles, want %d", n, statusCount[online.Reliable]+statusCount[online.Emerging])
		}
		if err := chromedp.Do(ctx, chromedp.SendKeys(chromedp.ID("q"), "ch1")); err != nil {
			t.Fatal(err)
		}
		ids = evaluate[[]string](t, ctx, tileIDsJS)
		want := 0
		for _, u := range snap.Units {
			if strings.Contains(u.ID, "ch1") && (u.Status == online.Reliable || u.Status == online.Emerging) {
				want++
			}
		}
		if len(ids) != want || want == 0 {
			t.Fatalf("text and status filter: %d tiles, want %d", len(ids), want)
		}
		for _, id := range ids {
			if !strings.Contains(id, "ch1") {
				t.Fatalf("text filter shows %s", id)
			}
		}
		q := pageQuery(t, ctx)
		if q.Get("status") != "emerging,reliable" || q.Get("q") != "ch1" || q.Get("token") != token {
			t.Errorf("URL after filtering: %v", q)
		}
		shoot(t, ctx, "many-filtered.png")
		if err := chromedp.Do(ctx, chromedp.Click(chromedp.ID("clear"))); err != nil {
			t.Fatal(err)
		}
		if n := len(evaluate[[]string](t, ctx, tileIDsJS)); n != popN {
			t.Errorf("after Show all: %d tiles", n)
		}
	})

	t.Run("deep link and keyboard", func(t *testing.T) {
		// An emerging unit among the filter's (which ones are emerging
		// follows the simulated population and the significance rule).
		unit := ""
		for _, u := range snap.Units {
			if u.Status == online.Emerging && strings.HasPrefix(u.ID, "ch0") && (unit == "" || naturalCompare(u.ID, unit) > 0) {
				unit = u.ID
			}
		}
		if unit == "" {
			t.Fatal("no emerging unit with an id starting ch0 in the simulated population")
		}
		link := base + "&tab=units&density=medium&sort=eta&status=emerging&q=ch0&unit=" + unit
		if err := chromedp.Do(ctx, chromedp.Navigate(link), chromedp.WaitVisible(chromedp.ID("d-body"))); err != nil {
			t.Fatalf("opening %s: %v", link, err)
		}
		if got := text(t, ctx, "#d-id"); got != "unit "+unit {
			t.Fatalf("the link opened %q, want unit %s", got, unit)
		}
		eventually(t, ctx, "medium tiles", `document.getElementById('tiles').className.includes('d-medium')`)
		if got := evaluate[string](t, ctx, `document.getElementById('sort').value + '|' + document.getElementById('q').value + '|' +
			[...document.querySelectorAll('#statuses .on')].map(e => e.dataset.status).join(',')`); got != "eta|ch0|emerging" {
			t.Errorf("the link's controls: %q, want eta|ch0|emerging", got)
		}
		ids := evaluate[[]string](t, ctx, tileIDsJS)
		for _, id := range ids {
			if !strings.HasPrefix(id, "ch0") || byID[id].Status != online.Emerging {
				t.Fatalf("the link shows %s (%s)", id, byID[id].Status)
			}
		}
		eta := func(id string) float64 { return sent(byID[id].ETA) }
		if err := checkOrder(ids, eta, false); err != nil {
			t.Errorf("the link's order: %v", err)
		}
		shoot(t, ctx, "many-detail.png")
		at := slices.Index(ids, unit)
		if at < 0 || len(ids) < 3 {
			t.Fatalf("%s at %d of %d shown units", unit, at, len(ids))
		}
		keys := []struct {
			key  string
			want string
		}{
			{kb.ArrowRight, ids[(at+1)%len(ids)]},
			{kb.ArrowRight, ids[(at+2)%len(ids)]},
			{kb.ArrowLeft, ids[(at+1)%len(ids)]},
			{kb.End, ids[len(ids)-1]},
			{kb.ArrowRight, ids[0]}, // wraps
			{kb.Home, ids[0]},
		}
		for _, k := range keys {
			if err := chromedp.Do(ctx, chromedp.KeyEvent(k.key)); err != nil {
				t.Fatal(err)
			}
			eventually(t, ctx, "unit "+k.want, fmt.Sprintf(`document.getElementById('d-id').textContent === %q`, "unit "+k.want))
			if got := pageQuery(t, ctx).Get("unit"); got != k.want {
				t.Errorf("after %q the URL names unit %q, want %q", k.key, got, k.want)
			}
		}
		eventually(t, ctx, "the detail of "+ids[0], `!document.getElementById('d-body').hidden`)
		// The link as it stands now reproduces the view in a new load.
		loc, err := chromedp.Run(ctx, chromedp.Location())
		if err != nil {
			t.Fatal(err)
		}
		if err := chromedp.Do(ctx, chromedp.Navigate(loc), chromedp.WaitVisible(chromedp.ID("d-body"))); err != nil {
			t.Fatal(err)
		}
		if got := text(t, ctx, "#d-id"); got != "unit "+ids[0] {
			t.Errorf("reloading %s opened %q", loc, got)
		}
		if got := evaluate[[]string](t, ctx, tileIDsJS); !slices.Equal(got, ids) {
			t.Errorf("reloading the link shows other tiles")
		}
		if err := chromedp.Do(ctx, chromedp.KeyEvent(kb.Escape), chromedp.WaitNotVisible(chromedp.ID("detail"))); err != nil {
			t.Fatal(err)
		}
		if q := pageQuery(t, ctx); q.Has("unit") {
			t.Errorf("the URL still names unit %q after Esc", q.Get("unit"))
		}
	})

	t.Run("population tab in the link", func(t *testing.T) {
		if err := chromedp.Do(ctx, chromedp.Navigate(base+"&tab=population"), chromedp.WaitVisible(chromedp.ID("popcanvas"))); err != nil {
			t.Fatal(err)
		}
		eventually(t, ctx, "the population drawn", `document.getElementById('popinfo').textContent.includes('reliable units drawn')`)
		shoot(t, ctx, "many-population.png")
	})

	// Last, as it changes the mapper: an STC request that cannot start says
	// so and why (issue 12 item 4). Requests fill the 16 places first.
	t.Run("STC request waits and says why", func(t *testing.T) {
		var asked []string
		for _, u := range snap.Units {
			if u.Status == online.Emerging && len(asked) < 16 {
				mapper.FlagSTC(u.ID, true)
				asked = append(asked, u.ID)
			}
		}
		var unit string
		for _, u := range snap.Units {
			if (u.Status == online.Reliable || u.Status == online.Emerging) && !slices.Contains(asked, u.ID) {
				unit = u.ID
				break
			}
		}
		if unit == "" || len(asked) < 16 {
			t.Fatalf("the population has %d emerging units asked for STC and no 17th significant one", len(asked))
		}
		src.set(mapper.Update())
		if err := chromedp.Do(ctx, chromedp.Navigate(base+"&unit="+unit), chromedp.WaitVisible(chromedp.ID("d-body"))); err != nil {
			t.Fatal(err)
		}
		if err := chromedp.Do(ctx, chromedp.Click(chromedp.ID("d-stc"))); err != nil {
			t.Fatal(err)
		}
		eventually(t, ctx, "the STC notice", `document.getElementById('notice').textContent.includes('STC requested')`)
		src.set(mapper.Update())
		want := "STC: waiting: all 16 STC places hold requested units — it starts when a place frees"
		eventually(t, ctx, "the STC state", fmt.Sprintf(`document.getElementById('d-stcstate').textContent === %q`, want))
		if got := text(t, ctx, "#d-stc"); got != "Stop STC" {
			t.Errorf("STC button %q after the request, want Stop STC", got)
		}
		shoot(t, ctx, "many-stc-waiting.png")
		// Withdrawing one request lets the waiting one start.
		mapper.FlagSTC(asked[0], false)
		src.set(mapper.Update())
		eventually(t, ctx, "the STC to start", `/^STC: (collecting|queued|running)/.test(document.getElementById('d-stcstate').textContent)`)
	})
}

// At 1024 units (a synthetic block: numbers and maps only) the page picks
// the compact grid, shows every unit, and a status filter still finds the
// few that need a look.
func TestBrowserThousandUnits(t *testing.T) {
	const n = 1024
	snap := syntheticSnapshot(n, 2)
	ctx := newBrowserSized(t, 1400, 900)
	srv := startPage(t, &rigSource{snap: snap}, Options{Poll: 50 * time.Millisecond})
	if err := chromedp.Do(ctx, chromedp.Navigate(srv.URL+"/"), chromedp.WaitVisible(chromedp.CSS(`#tiles .tile`))); err != nil {
		t.Fatal(err)
	}
	eventually(t, ctx, "every tile", fmt.Sprintf(`document.querySelectorAll('#tiles .tile').length === %d`, n))
	if cls := evaluate[string](t, ctx, `document.getElementById('tiles').className`); !strings.Contains(cls, "d-compact") {
		t.Fatalf("at %d units the automatic density is %q, want compact", n, cls)
	}
	height := evaluate[float64](t, ctx, `document.documentElement.scrollHeight`)
	t.Logf("page height %.0f px = %.2f screens of 900 px at %d units", height, height/900, n)
	shoot(t, ctx, "thousand-compact.png")
	noField := 0
	for _, u := range snap.Units {
		if u.Status == online.NoField {
			noField++
		}
	}
	if err := chromedp.Do(ctx, chromedp.Click(chromedp.CSS(`#statuses [data-status="no field"]`))); err != nil {
		t.Fatal(err)
	}
	if got := len(evaluate[[]string](t, ctx, tileIDsJS)); got != noField {
		t.Errorf("no-field filter: %d tiles, want %d", got, noField)
	}
}

// A page opened without the token of a server that has one says so, rather
// than only showing a lost connection.
func TestBrowserAsksForToken(t *testing.T) {
	ctx := newBrowser(t)
	srv := startPage(t, &rigSource{snap: snapAt(1)}, Options{Token: "the-token", Poll: 50 * time.Millisecond})
	if err := chromedp.Do(ctx, chromedp.Navigate(srv.URL+"/"), chromedp.WaitVisible(chromedp.ID("bar"))); err != nil {
		t.Fatal(err)
	}
	eventually(t, ctx, "the token notice", `document.getElementById('notice').textContent.includes('needs its access token')`)
	if got := text(t, ctx, "#link"); got == "live" {
		t.Errorf("the websocket is %q without the token", got)
	}
	if n := evaluate[int](t, ctx, `document.querySelectorAll('#tiles .tile').length`); n != 0 {
		t.Errorf("%d tiles shown without the token", n)
	}
}
