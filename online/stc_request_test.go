package online

import (
	"strings"
	"testing"
)

// A unit the experimenter asks STC for takes precedence over the units that
// got STC automatically for having no field, and every unit's STCState says
// what became of its STC: running or collecting when it has a place,
// waiting (and why) when every place holds a request (issue 12 item 4).
func TestSTCRequestTakesPrecedence(t *testing.T) {
	const places = 2
	cfg := Config{Width: 4, Height: 4, Lags: 3, White: true, PixelVariance: 1, STCLags: 1, MinSpikes: 50, STCMaxUnits: places, SmallestField: 1}
	// Five units without any field: each turns "no field" once a strong field
	// (SmallestField 1) would have been detected.
	cells := make([]lnpCell, 5)
	for i := range cells {
		cells[i] = lnpCell{filter: make([]float64, 4*4*3), base: 0.5}
	}
	sim := newSimulation(t, cfg, cells, 11, binaryFrame)
	sim.run(600)
	state := func() map[string]string {
		snap := sim.m.Update()
		out := map[string]string{}
		for _, u := range snap.Units {
			d, _ := snap.Detail(u.ID)
			if u.Status != NoField {
				t.Fatalf("unit %s is %q, the test needs every unit without a field", u.ID, u.Status)
			}
			out[u.ID] = d.STCState
		}
		if len(sim.m.stc) > places {
			t.Fatalf("%d units have STC, the cap is %d", len(sim.m.stc), places)
		}
		return out
	}
	hasPlace := func(s string) bool {
		return s == "running" || s == "queued for results" || strings.HasPrefix(s, "collecting: ")
	}

	// The automatic units fill the places (which ones depends on when each
	// turned "no field").
	st := state()
	var auto, free []string
	for _, id := range []string{"u0", "u1", "u2", "u3", "u4"} {
		switch {
		case hasPlace(st[id]):
			auto = append(auto, id)
		case st[id] == "":
			free = append(free, id)
		default:
			t.Fatalf("unit %s: state %q", id, st[id])
		}
	}
	if len(auto) != places || len(free) != 5-places {
		t.Fatalf("automatic STC: states %q, want %d units with a place, the rest without", st, places)
	}
	// A request takes the place of an automatic unit (the latest by index).
	req := free[0]
	sim.m.FlagSTC(req, true)
	st = state()
	if !hasPlace(st[req]) {
		t.Fatalf("requested unit %s: STC state %q, want a place (states %q)", req, st[req], st)
	}
	kept, dropped := auto[0], auto[1]
	if st[dropped] != "" || !hasPlace(st[kept]) {
		t.Fatalf("after the request: states %q, want %s dropped and %s kept", st, dropped, kept)
	}
	// Requests fill every place: a third request waits, and says why.
	third := free[1]
	sim.m.FlagSTC(kept, true)
	sim.m.FlagSTC(third, true)
	st = state()
	if want := "waiting: all 2 STC places hold requested units"; st[third] != want {
		t.Fatalf("third request: state %q, want %q", st[third], want)
	}
	// Its turn comes when a request is withdrawn.
	sim.m.FlagSTC(req, false)
	st = state()
	if !hasPlace(st[third]) || st[req] != "" {
		t.Fatalf("after withdrawing %s: states %q, want %s with a place and %s without", req, st, third, req)
	}
	// With enough spikes the requested units report results.
	sim.run(3000)
	for range 2 * stcEvery * places {
		st = state()
	}
	if st[kept] != "running" || st[third] != "running" {
		t.Fatalf("after 3000 more bins: states %q, want %s and %s running", st, kept, third)
	}
}

// On a stimulus that is not white noise STC cannot run; a request is
// answered with the reason instead of silence.
func TestSTCRequestUnavailable(t *testing.T) {
	cfg := Config{Width: 4, Height: 4, Lags: 3, PixelVariance: 1, MinSpikes: 50}
	sim := newSimulation(t, cfg, []lnpCell{{filter: make([]float64, 4*4*3), base: 0.5}}, 12, binaryFrame)
	sim.run(100)
	sim.m.FlagSTC("u0", true)
	d, _ := sim.m.Update().Detail("u0")
	if !strings.HasPrefix(d.STCState, "unavailable: ") {
		t.Fatalf("STC state %q on a stimulus that is not white, want unavailable", d.STCState)
	}
}
