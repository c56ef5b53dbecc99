// Package display serves the live estimates over HTTP.
//
// # What it owns
//
// The JSON API (api.go): the per-second unit list, one unit's full
// estimate, the ingest health counters, and the few commands an
// experimenter gives during a session (reset after the electrode moved,
// spike-triggered covariance on a unit, the reliability criterion). The
// websocket fan-out (hub.go) and the tiles it sends each browser at the
// density the browser chose (tiles.go), the embedded page (page.go, web/,
// its script modules in web/js), the server-side PNG renderers (png.go),
// the NPY and JSON exports (export.go), and Server (server.go), which
// mounts them all behind the token guard: with a token set, everything but
// the page shell needs it.
// The endpoints of a practice run (practice.go) are mounted beside Server
// by the command that runs the practice.
//
// # Goroutines
//
// An API is an http.Handler: net/http calls ServeHTTP from many goroutines
// at once. The handler keeps no mutable state of its own; it reads the
// SnapshotSource, whose methods must therefore be safe for concurrent use.
// Snapshots are immutable, so a response is encoded from one consistent
// update without locks.
//
// Hub.Run owns the set of websocket clients; Publish, Stats and ServeHTTP
// may be called from any goroutine. Each websocket has exactly one reader
// and one writer goroutine, and a one-slot queue in which a newer update
// replaces one not yet sent, so a slow browser never holds up the hub.
// Server.Run is called once and returns after every connection has closed;
// it hands the hub each new snapshot when the source's update hook rings
// Options.Updates (Updates.Notify never blocks: the latest wins), or polls
// a source without a hook every Options.Poll.
// The renderers are pure functions of an immutable Snapshot.
//
// # Limits
//
// Request bodies are read through http.MaxBytesReader (MaxBody bytes);
// unit ids in paths are at most MaxIDLength bytes. Errors are JSON objects
// {"error": "display: …"} with a 4xx status.
package display
