package shards_test

import (
	"context"
	"fmt"
	"net/http"

	"github.com/nats-io/nats.go"

	"livefield/display"
	"livefield/stream/ingest"
	"livefield/stream/shards"
)

// The endpoints of shard 0 of 2 of rig1 sit outside the rig's subjects.
func ExampleShardSubject() {
	fmt.Println(shards.ShardSubject("livefield.rig1", ingest.Shard{Index: 0, Count: 2}) + ".snapshot")
	// Output: livefield-svc.livefield.rig1.s0of2.snapshot
}

// A worker announces itself; elsewhere, a view merges the rig's shards and
// the display package serves it as one page.
func ExampleNewView() {
	nc, err := nats.Connect(nats.DefaultURL)
	if err != nil {
		return
	}
	defer nc.Close()
	rig, err := ingest.Start(context.Background(), nc, ingest.Options{Prefix: "livefield.rig1", Shard: ingest.Shard{Index: 0, Count: 2}})
	if err != nil {
		return
	}
	defer rig.Close()
	svc, err := shards.Announce(nc, rig, shards.Info{Rig: "rig1", Prefix: "livefield.rig1", Shard: ingest.Shard{Index: 0, Count: 2}})
	if err != nil {
		return
	}
	defer svc.Stop()

	view := shards.NewView(nc, "livefield.rig1", shards.ViewOptions{})
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	go view.Run(ctx)
	web := display.NewServer(view, display.Options{})
	go web.Run(ctx)
	_ = http.ListenAndServe("127.0.0.1:8090", web)
}
