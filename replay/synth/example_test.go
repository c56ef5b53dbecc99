package synth_test

import (
	"fmt"
	"log"

	"livefield/replay/synth"
	"livefield/stream/stimulus"
)

// A rig of the default population watching binary noise: one second of
// bins, then the ground truth of the first units.
func Example() {
	src, err := stimulus.Open(stimulus.Spec{Type: "binary", Width: 16, Height: 16, Seed: 42}, "")
	if err != nil {
		log.Fatal(err)
	}
	rig, err := synth.New(synth.Scenario{Seed: 1}, src)
	if err != nil {
		log.Fatal(err)
	}
	dt := rig.Scenario().FramePeriod
	spikes := 0
	for k := range int64(60) {
		// Bin k shows stimulus frame k from k·dt to (k+1)·dt.
		err := rig.Bin(k, k, float64(k)*dt, float64(k+1)*dt, func(unit string, t float64) { spikes++ })
		if err != nil {
			log.Fatal(err)
		}
	}
	fmt.Println(len(rig.Units()), "units,", spikes > 0)
	for _, u := range rig.Units()[:3] {
		fmt.Printf("%s %s filter %v\n", u.ID, u.Kind, u.Filter != nil)
	}
	// Output:
	// 15 units, true
	// ch00.1 simple filter true
	// ch03.1 centre-surround filter true
	// ch05.1 complex filter false
}
