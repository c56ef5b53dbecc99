// Package display serves the live estimates over HTTP.
//
// # What it owns
//
// The JSON API (api.go): the per-second unit list, one unit's full
// estimate, the ingest health counters, and the few commands an
// experimenter gives during a session (reset after the electrode moved,
// spike-triggered covariance on a unit, the reliability criterion). The
// web page is served from other files of this package.
//
// # Goroutines
//
// An API is an http.Handler: net/http calls ServeHTTP from many goroutines
// at once. The handler keeps no mutable state of its own; it reads the
// SnapshotSource, whose methods must therefore be safe for concurrent use.
// Snapshots are immutable, so a response is encoded from one consistent
// update without locks.
//
// # Limits
//
// Request bodies are read through http.MaxBytesReader (MaxBody bytes);
// unit ids in paths are at most MaxIDLength bytes. Errors are JSON objects
// {"error": "display: …"} with a 4xx status.
package display
