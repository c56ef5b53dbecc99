package main

import (
	"context"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"sync"

	"livefield/display"
	"livefield/stream/shards"
)

// runView serves the merged page of each rig from its announced shard
// workers (stream/shards.Front).
func runView(ctx context.Context, fs *flag.FlagSet, args []string, stdout, stderr io.Writer) error {
	var nf natsFlags
	nf.add(fs, requiredNATS)
	rig := fs.String("rig", "", "serve only this rig (its page shows its shards as missing until they announce themselves); all rigs when empty")
	addr := fs.String("http", "127.0.0.1:8090", "HTTP listen address")
	apiToken := fs.String("api-token", "", "when set, required by every data endpoint, the exports and the websocket, header "+display.TokenHeader)
	if err := parse(fs, args); err != nil {
		return err
	}
	log := slog.New(slog.NewTextHandler(stderr, nil))
	if *rig != "" {
		if _, err := rigPrefix(*rig); err != nil {
			return err
		}
	}
	opts, err := nf.options("livefield view", log)
	if err != nil {
		return err
	}
	ln, err := listen(*addr)
	if err != nil {
		return err
	}
	defer ln.Close()
	token, err := webToken(ln, *apiToken, stdout)
	if err != nil {
		return err
	}
	nc, err := nf.connect(opts)
	if err != nil {
		return err
	}
	defer nc.Close()
	front := shards.NewFront(nc, shards.FrontOptions{Rig: *rig, Token: token, View: shards.ViewOptions{Logger: log}})
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	var wg sync.WaitGroup
	wg.Add(1)
	go func() { defer wg.Done(); front.Run(ctx) }()
	defer wg.Wait()
	fmt.Fprintf(stdout, "livefield: merging the shards announced on %s\nlivefield: open http://%s/\n", redact(nf.url), ln.Addr())
	return serveHandler(ctx, ln, front)
}
