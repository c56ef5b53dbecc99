package display

import (
	"embed"
	"io/fs"
	"net/http"
)

//go:embed web
var webFiles embed.FS

// pageFiles is the embedded page: index.html, style.css and the script
// modules under js/.
var pageFiles, _ = fs.Sub(webFiles, "web")

// Page serves the embedded web page: "/" is index.html, "/static/…" the
// script and style sheet. It is stateless and safe for concurrent use.
func Page() http.Handler {
	mux := http.NewServeMux()
	static := http.StripPrefix("/static/", http.FileServerFS(pageFiles))
	mux.Handle("GET /static/", noCache(static))
	mux.HandleFunc("GET /{$}", func(w http.ResponseWriter, r *http.Request) {
		b, err := fs.ReadFile(pageFiles, "index.html")
		if err != nil {
			http.Error(w, "display: page missing", http.StatusInternalServerError)
			return
		}
		h := w.Header()
		h.Set("Content-Type", "text/html; charset=utf-8")
		h.Set("Cache-Control", "no-cache")
		// The page runs only its own script and talks only to this host.
		h.Set("Content-Security-Policy", "default-src 'self'; img-src 'self' data:; connect-src 'self' ws: wss:")
		h.Set("X-Content-Type-Options", "nosniff")
		_, _ = w.Write(b)
	})
	return mux
}

func noCache(h http.Handler) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		w.Header().Set("Cache-Control", "no-cache")
		h.ServeHTTP(w, r)
	})
}
