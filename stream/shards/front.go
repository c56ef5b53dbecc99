package shards

import (
	"context"
	"crypto/subtle"
	"encoding/json"
	"html/template"
	"net/http"
	"net/url"
	"sort"
	"strings"
	"sync"
	"time"

	"github.com/nats-io/nats.go"

	"livefield/display"
)

// FrontOptions configure a Front.
type FrontOptions struct {
	// Rig, when set, is the only rig served (its page exists before any of
	// its workers announces itself, showing them as missing).
	Rig string
	// Token guards each rig's data, controls, exports and websocket as in
	// display.Options; the rig list and the page shells stay open.
	Token string
	View  ViewOptions
}

// Front serves the merged page of every rig whose workers announce
// themselves: /rigs/<rig>/ is the rig's page (the display package's page,
// API and websocket over its View), / a rig selector (or the rig's page when
// there is only one), /api/rigs the list as JSON.
type Front struct {
	nc  *nats.Conn
	opt FrontOptions

	mu   sync.Mutex
	rigs map[string]*rigPage // by rig name
	ctx  context.Context
	wg   sync.WaitGroup
}

type rigPage struct {
	name, prefix string
	view         *View
	web          *display.Server
	handler      http.Handler
}

// NewFront returns a front for the rigs announced on nc; Run starts it.
func NewFront(nc *nats.Conn, opt FrontOptions) *Front {
	opt.View.fill()
	return &Front{nc: nc, opt: opt, rigs: map[string]*rigPage{}}
}

// Run discovers rigs every poll and keeps their views and pages running
// until ctx is done; then it waits for them.
func (f *Front) Run(ctx context.Context) {
	f.mu.Lock()
	f.ctx = ctx
	f.mu.Unlock()
	if f.opt.Rig != "" {
		f.page(f.opt.Rig, "livefield."+f.opt.Rig)
	}
	t := time.NewTicker(f.opt.View.Poll)
	defer t.Stop()
	for {
		if inst, err := Discover(ctx, f.nc, f.opt.View.DiscoverWait); err == nil {
			for _, in := range inst {
				if in.Rig != "" && (f.opt.Rig == "" || in.Rig == f.opt.Rig) {
					f.page(in.Rig, in.Prefix)
				}
			}
		}
		select {
		case <-ctx.Done():
			f.wg.Wait()
			return
		case <-t.C:
		}
	}
}

// page returns the rig's page, starting it on first sight.
func (f *Front) page(name, prefix string) *rigPage {
	f.mu.Lock()
	defer f.mu.Unlock()
	if p := f.rigs[name]; p != nil || f.ctx == nil {
		return p
	}
	v := NewView(f.nc, prefix, f.opt.View)
	web := display.NewServer(v, display.Options{Token: f.opt.Token, Poll: f.opt.View.Poll})
	p := &rigPage{name: name, prefix: prefix, view: v, web: web}
	p.handler = http.StripPrefix("/rigs/"+name, f.prefetch(v, web))
	f.rigs[name] = p
	ctx := f.ctx
	f.wg.Add(3)
	go func() { defer f.wg.Done(); v.Run(ctx) }()
	go func() { defer f.wg.Done(); web.Run(ctx) }()
	go func() {
		// The page's open units: their details are fetched every round.
		defer f.wg.Done()
		t := time.NewTicker(f.opt.View.Poll / 2)
		defer t.Stop()
		for {
			v.Want(web.Hub().InView())
			select {
			case <-ctx.Done():
				return
			case <-t.C:
			}
		}
	}()
	return p
}

// View returns the view of a rig that has been seen (nil otherwise).
func (f *Front) View(rig string) *View {
	f.mu.Lock()
	defer f.mu.Unlock()
	if p := f.rigs[rig]; p != nil {
		return p.view
	}
	return nil
}

// prefetch fetches the unit details that a request reads before the
// display package answers it: one unit for its API and export paths, every
// unit for the whole-rig exports.
func (f *Front) prefetch(v *View, next http.Handler) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		if f.opt.Token == "" || tokenOK(r, f.opt.Token) {
			p := r.URL.Path
			switch {
			case strings.HasPrefix(p, "/api/units/"):
				id, _ := strings.CutSuffix(strings.TrimPrefix(p, "/api/units/"), "/stc")
				v.Fetch(r.Context(), []string{id}, false)
			case strings.HasPrefix(p, "/export/units/"):
				id := strings.TrimPrefix(p, "/export/units/")
				id = strings.TrimSuffix(strings.TrimSuffix(id, ".png"), ".npy")
				v.Fetch(r.Context(), []string{id}, false)
			case strings.HasPrefix(p, "/export/"):
				v.Fetch(r.Context(), nil, true)
			}
		}
		next.ServeHTTP(w, r)
	})
}

func tokenOK(r *http.Request, token string) bool {
	got := r.Header.Get(display.TokenHeader)
	if got == "" {
		got = r.URL.Query().Get("token")
	}
	return subtle.ConstantTimeCompare([]byte(got), []byte(token)) == 1
}

// RigInfo is one rig in the selector.
type RigInfo struct {
	Rig     string   `json:"rig"`
	Prefix  string   `json:"prefix"`
	Shards  int      `json:"shards"`
	Missing []string `json:"missing"`
	Units   int      `json:"units"`
	Block   string   `json:"block"`
	Path    string   `json:"path"`
}

// Rigs lists the rigs seen, by name.
func (f *Front) Rigs() []RigInfo {
	f.mu.Lock()
	pages := make([]*rigPage, 0, len(f.rigs))
	for _, p := range f.rigs {
		pages = append(pages, p)
	}
	f.mu.Unlock()
	out := make([]RigInfo, 0, len(pages))
	for _, p := range pages {
		h := p.view.Counters()
		out = append(out, RigInfo{Rig: p.name, Prefix: p.prefix, Shards: len(h.Shards), Missing: h.Missing,
			Units: h.Units, Block: h.Block, Path: "rigs/" + url.PathEscape(p.name) + "/"})
	}
	sort.Slice(out, func(i, j int) bool { return out[i].Rig < out[j].Rig })
	return out
}

// ServeHTTP implements http.Handler.
func (f *Front) ServeHTTP(w http.ResponseWriter, r *http.Request) {
	p := r.URL.Path
	switch {
	case p == "/api/rigs":
		b, _ := json.Marshal(f.Rigs())
		w.Header().Set("Content-Type", "application/json")
		w.Header().Set("Cache-Control", "no-store")
		_, _ = w.Write(b)
	case strings.HasPrefix(p, "/rigs/"):
		name, rest, _ := strings.Cut(strings.TrimPrefix(p, "/rigs/"), "/")
		f.mu.Lock()
		page := f.rigs[name]
		f.mu.Unlock()
		switch {
		case page == nil:
			http.Error(w, "livefield: no rig "+name+" has announced itself", http.StatusNotFound)
		case rest == "" && !strings.HasSuffix(p, "/"):
			http.Redirect(w, r, "/rigs/"+url.PathEscape(name)+"/"+query(r), http.StatusFound)
		default:
			page.handler.ServeHTTP(w, r)
		}
	case p == "/":
		rigs := f.Rigs()
		if len(rigs) == 1 {
			http.Redirect(w, r, "/"+rigs[0].Path+query(r), http.StatusFound)
			return
		}
		w.Header().Set("Content-Type", "text/html; charset=utf-8")
		w.Header().Set("Cache-Control", "no-store")
		_ = selectorPage.Execute(w, map[string]any{"Rigs": rigs, "Query": query(r)})
	default:
		http.NotFound(w, r)
	}
}

func query(r *http.Request) string {
	if r.URL.RawQuery == "" {
		return ""
	}
	return "?" + r.URL.RawQuery
}

var selectorPage = template.Must(template.New("rigs").Parse(`<!doctype html>
<html lang="en"><head><meta charset="utf-8"><title>livefield: rigs</title>
<meta http-equiv="refresh" content="5">
<style>body{font:15px system-ui,sans-serif;margin:2em;background:#fbfaf7;color:#222}
table{border-collapse:collapse}td,th{padding:.4em 1em;text-align:left;border-bottom:1px solid #ddd}
.missing{color:#a33}</style></head><body>
<h1>livefield: rigs on this NATS server</h1>
{{if .Rigs}}<table id="rigs"><tr><th>rig</th><th>block</th><th>units</th><th>shards</th></tr>
{{range .Rigs}}<tr class="rig"><td><a href="{{.Path}}{{$.Query}}">{{.Rig}}</a></td><td>{{.Block}}</td><td>{{.Units}}</td>
<td>{{.Shards}}{{if .Missing}} <span class="missing">missing: {{range .Missing}}{{.}} {{end}}</span>{{end}}</td></tr>
{{end}}</table>{{else}}<p id="none">No livefield worker has announced itself yet. Start <code>livefield serve</code> for a rig; this page refreshes itself.</p>{{end}}
</body></html>
`))
