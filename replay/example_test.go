package replay_test

import (
	"context"
	"fmt"
	"log"
	"time"

	"livefield/replay"
	"livefield/replay/session"
)

// A full-speed pass over the first ten seconds of a recorded session: the
// records into the feeder, the estimates updated once at the end, then the
// final snapshot.
func ExampleFeeder_FeedSession() {
	f, err := session.Open("../testdata/sessions/synth-30s.lfs")
	if err != nil {
		log.Fatal(err)
	}
	defer f.Close()
	feeder, err := replay.NewFeeder(replay.FeedOptions{UpdateEvery: replay.FinalOnly})
	if err != nil {
		log.Fatal(err)
	}
	played, err := feeder.FeedSession(context.Background(), f.Reader, replay.PassOptions{
		Until: func() bool { return float64(feeder.Health().StreamTime) >= 10 },
	})
	if err != nil {
		log.Fatal(err)
	}
	snap := feeder.Finish()
	st := feeder.Health()
	fmt.Printf("%d records, %d blocks, %d bins\n", played.Records, st.Blocks, st.Bins)
	fmt.Printf("block %s: %d units over %.0f s\n", snap.Block, len(snap.Units), float64(snap.T))
	// Output:
	// 701 records, 1 blocks, 618 bins
	// block B1: 14 units over 10 s
}

// Messages fed one by one, as a rig would send them: a block of 4×4
// binary noise at 20 Hz, one second of frames and a unit that fires in
// every other frame. Their arrival times are the feeder's clock.
func ExampleFeeder_Feed() {
	feeder, err := replay.NewFeeder(replay.FeedOptions{})
	if err != nil {
		log.Fatal(err)
	}
	arrival := time.Date(2026, 5, 1, 9, 0, 0, 0, time.UTC)
	feed := func(subject, data string) {
		if err := feeder.Feed(subject, []byte(data), arrival); err != nil {
			log.Fatal(err)
		}
	}
	feed("block", `{"kind":"start","block":"B1","t":0,"stimulus":{"type":"binary","width":4,"height":4,"seed":3},"lags":2,"frame_period":0.05}`)
	feed("frames", `{"block":"B1","index":[0,1,2,3,4,5,6,7,8,9,10,11,12,13,14,15,16,17,18,19],"t":[0,0.05,0.1,0.15,0.2,0.25,0.3,0.35,0.4,0.45,0.5,0.55,0.6,0.65,0.7,0.75,0.8,0.85,0.9,0.95]}`)
	feed("spikes", `{"unit":["u1","u1","u1","u1","u1"],"t":[0.01,0.11,0.21,0.31,0.41]}`)
	arrival = arrival.Add(2 * time.Second)
	feed("block", `{"kind":"end","block":"B1","t":1}`)
	snap := feeder.Snapshot()
	st := feeder.Health()
	fmt.Printf("%d messages, %d bins, %d spikes\n", st.Processed, st.Bins, st.SpikesTotal)
	fmt.Printf("block %s: unit %s\n", snap.Block, snap.Units[0].ID)
	// Output:
	// 4 messages, 20 bins, 5 spikes
	// block B1: unit u1
}
