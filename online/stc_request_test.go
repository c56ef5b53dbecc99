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
	cfg := Config{Width: 4, Height: 4, Lags: 3, White: true, PixelVariance: 1, STCLags: 1, MinSpikes: 50, STCMaxUnits: places}
	// Five units without any field: each turns "no field" after 50 spikes.
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

	// The automatic units fill the places.
	st := state()
	if !hasPlace(st["u0"]) || !hasPlace(st["u1"]) || st["u2"] != "" || st["u4"] != "" {
		t.Fatalf("automatic STC: states %q, want u0 and u1 with a place, the rest without", st)
	}
	// A request takes the place of an automatic unit (the latest, u1).
	sim.m.FlagSTC("u4", true)
	st = state()
	if !hasPlace(st["u4"]) {
		t.Fatalf("requested unit u4: STC state %q, want a place (states %q)", st["u4"], st)
	}
	if st["u1"] != "" || !hasPlace(st["u0"]) {
		t.Fatalf("after the request: states %q, want u1 dropped and u0 kept", st)
	}
	// Requests fill every place: a third request waits, and says why.
	sim.m.FlagSTC("u0", true)
	sim.m.FlagSTC("u3", true)
	st = state()
	if want := "waiting: all 2 STC places hold requested units"; st["u3"] != want {
		t.Fatalf("third request: state %q, want %q", st["u3"], want)
	}
	// Its turn comes when a request is withdrawn.
	sim.m.FlagSTC("u4", false)
	st = state()
	if !hasPlace(st["u3"]) || st["u4"] != "" {
		t.Fatalf("after withdrawing u4: states %q, want u3 with a place and u4 without", st)
	}
	// With enough spikes the requested units report results.
	sim.run(3000)
	for range 2 * stcEvery * places {
		st = state()
	}
	if st["u0"] != "running" || st["u3"] != "running" {
		t.Fatalf("after 3000 more bins: states %q, want u0 and u3 running", st)
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
