package display

import "net/http"

// Practice is a practice run as its endpoints see it (replay.Practice): a
// trainee replays a block, stops it, and gets a report.
type Practice interface {
	// Stop is the trainee's decision; later calls do nothing.
	Stop()
	// State is "running", "finishing" or "done".
	State() string
	// Result is the finished report, nil before it is done.
	Result() any
}

// PracticeHandler serves the endpoints of a practice run:
//
//	POST /api/practice/stop     the trainee's stop: 202 and {"state": …}
//	GET  /api/practice/report   {"state": …} while running, the report when done
//
// token, when not empty, is required by the stop, as by the other controls
// (header TokenHeader or ?token=).
func PracticeHandler(p Practice, token string) http.Handler {
	mux := http.NewServeMux()
	mux.HandleFunc("POST /api/practice/stop", func(w http.ResponseWriter, r *http.Request) {
		if token != "" && !tokenOK(r, token) {
			fail(w, http.StatusUnauthorized, "display: missing or wrong token (header %s or ?token=)", TokenHeader)
			return
		}
		p.Stop()
		writeJSON(accepted{w}, map[string]string{"state": p.State()})
	})
	mux.HandleFunc("GET /api/practice/report", func(w http.ResponseWriter, _ *http.Request) {
		if rep := p.Result(); rep != nil {
			writeJSON(w, rep)
			return
		}
		writeJSON(w, map[string]string{"state": p.State()})
	})
	return mux
}

// accepted answers 202 Accepted with the first write, after the headers
// that writeJSON sets.
type accepted struct{ http.ResponseWriter }

func (a accepted) Write(b []byte) (int, error) {
	a.ResponseWriter.WriteHeader(http.StatusAccepted)
	return a.ResponseWriter.Write(b)
}
