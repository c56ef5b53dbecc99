package ingest_test

import (
	"context"
	"fmt"
	"time"

	"github.com/nats-io/nats.go"

	"livefield/stream/ingest"
	"livefield/stream/natstest"
)

func Example() {
	// A NATS server of the test's own; a rig's would do.
	srv, err := natstest.New(natstest.Options{})
	if err != nil {
		panic(err)
	}
	defer srv.Close()
	nc, err := nats.Connect(srv.URL())
	if err != nil {
		panic(err)
	}
	defer nc.Close()

	r, err := ingest.Start(context.Background(), nc, ingest.Options{Prefix: "livefield.rig1"})
	if err != nil {
		panic(err)
	}
	defer r.Close()

	// The rig announces a block of 8×8 binary noise, shows 6 frames at
	// 60 Hz, and ends the block.
	nc.Publish("livefield.rig1.block", []byte(`{"kind":"start","block":"B1","t":0,"stimulus":{"type":"binary","width":8,"height":8,"seed":1}}`))
	nc.Publish("livefield.rig1.frames", []byte(`{"block":"B1","index":[0,1,2,3,4,5],"t":[0,0.0167,0.0333,0.05,0.0667,0.0833]}`))
	nc.Publish("livefield.rig1.spikes", []byte(`{"unit":["ch01.0","ch01.0"],"t":[0.02,0.07]}`))
	nc.Publish("livefield.rig1.block", []byte(`{"kind":"end","block":"B1","t":0.1}`))
	nc.Flush()
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	r.WaitProcessed(ctx, 4)
	r.Sync()
	h := r.Health()
	fmt.Println(h.Block, h.BlockState, "bins:", h.Bins, "spikes:", h.SpikesTotal, "rejected:", len(h.Rejected))
	// Output: B1 ended bins: 6 spikes: 2 rejected: 0
}

// ExampleLoop feeds the same messages without NATS, as a replay does: the
// arrival times are the update clock.
func ExampleLoop() {
	l, err := ingest.NewLoop(ingest.Options{})
	if err != nil {
		panic(err)
	}
	at := time.Date(2026, 5, 1, 9, 0, 0, 0, time.UTC)
	l.Feed("block", []byte(`{"kind":"start","block":"B1","t":0,"stimulus":{"type":"binary","width":8,"height":8,"seed":1}}`), at)
	l.Feed("frames", []byte(`{"block":"B1","index":[0,1,2,3,4,5],"t":[0,0.0167,0.0333,0.05,0.0667,0.0833]}`), at)
	l.Feed("spikes", []byte(`{"unit":["ch01.0","ch01.0"],"t":[0.02,0.07]}`), at)
	err = l.Feed("spikes", []byte(`{"unit":["ch01.0"],"t":[-1]}`), at)
	fmt.Println("refused:", err.(*ingest.Error).Reason)
	l.Feed("block", []byte(`{"kind":"end","block":"B1","t":0.1}`), at.Add(time.Second))
	h := l.Health()
	fmt.Println("bins:", h.Bins, "spikes:", h.SpikesTotal, "units:", len(l.Snapshot().Units))
	// Output:
	// refused: negative-time
	// bins: 6 spikes: 2 units: 1
}
