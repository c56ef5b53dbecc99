package main

import (
	"bufio"
	"context"
	"encoding/json"
	"flag"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"strings"

	"livefield/display"
	"livefield/online"
	"livefield/replay"
)

func runPractice(ctx context.Context, fs *flag.FlagSet, args []string, stdout, stderr io.Writer) error {
	addr := fs.String("http", "127.0.0.1:8080", "HTTP listen address of the page (empty: terminal only)")
	var pace pacing
	pace.add(fs, "playback speed before the stop (1 is real time; max only with --stop-at)")
	stopFlag := fs.String("stop-at", "", "stop by itself this long after the block start (a scripted decision)")
	reportPath := fs.String("report", "", "where to write the JSON report (default FILE with .practice.json)")
	stimuli := fs.String("stimuli", ".", "directory of movie stimulus files")
	file, err := pace.fileArg(fs, args)
	if err != nil {
		return err
	}
	speed, from := pace.speed, pace.from
	stopAt, err := parseSeconds("--stop-at", *stopFlag)
	if err != nil {
		return err
	}
	if speed == 0 && stopAt == 0 {
		return fmt.Errorf("--speed max leaves no time to decide; give --stop-at or a speed")
	}
	if *reportPath == "" {
		*reportPath = strings.TrimSuffix(file, filepath.Ext(file)) + ".practice.json"
	}
	f, _, err := openSession(file, stdout)
	if err != nil {
		return err
	}
	defer f.Close()
	updates := display.NewUpdates()
	p, err := replay.NewPractice(replay.PracticeOptions{
		Feed:     replay.FeedOptions{StimuliDir: *stimuli, OnUpdate: updates.Notify},
		Speed:    speed,
		StopAt:   stopAt,
		From:     from,
		OnDamage: damageLogger(stderr),
	})
	if err != nil {
		return err
	}
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	var served chan error // the page's server, when there is a page
	if *addr != "" {
		ln, err := listen(*addr)
		if err != nil {
			return err
		}
		defer ln.Close()
		token, err := webToken(ln, "", stdout)
		if err != nil {
			return err
		}
		served = make(chan error, 1)
		go func() {
			served <- serveHTTP(ctx, ln, p.Source(), updates, token, io.Discard, route{"/api/practice/", display.PracticeHandler(p, token)})
		}()
		defer func() { cancel(); <-served }()
		fmt.Fprintf(stdout, "livefield: open http://%s/?practice=1%s ; stop with the page's Stop button, Enter here, or POST /api/practice/stop\n", ln.Addr(), tokenQuery(token))
	} else {
		fmt.Fprintln(stdout, "livefield: press Enter to stop the block")
	}
	// Enter on the terminal is the stop. The reader goroutine may stay
	// blocked on the terminal until the process exits.
	go func() {
		if _, err := bufio.NewReader(os.Stdin).ReadString('\n'); err == nil {
			p.Stop()
		}
	}()
	rep, err := p.Run(ctx, f.Reader, filepath.Base(file))
	if err != nil {
		return err
	}
	b, err := json.MarshalIndent(rep, "", "  ")
	if err != nil {
		return fmt.Errorf("report: %w", err)
	}
	if err := os.WriteFile(*reportPath, append(b, '\n'), 0o644); err != nil {
		return fmt.Errorf("--report: %w", err)
	}
	printPractice(stdout, rep)
	fmt.Fprintf(stdout, "livefield: report written to %s\n", *reportPath)
	if served == nil {
		return nil
	}
	fmt.Fprintln(stdout, "livefield: the report is served at /api/practice/report until Ctrl-C")
	select {
	case <-ctx.Done():
		return nil
	case err := <-served:
		served <- err // for the deferred wait
		return err
	}
}

// printPractice prints the score, one line per unit.
func printPractice(w io.Writer, r *replay.Report) {
	fmt.Fprintf(w, "livefield: %s\n", r.Summary)
	fmt.Fprintf(w, "  %-10s %8s %8s %-11s %-11s %8s %8s\n", "unit", "spikes", "of", "at stop", "at end", "ridge r", "STA r")
	for _, u := range r.Units {
		fmt.Fprintf(w, "  %-10s %8d %8d %-11s %-11s %8s %8s\n", u.ID, u.SpikesAtStop, u.SpikesFull, u.StatusAtStop, u.StatusFull, fmtR(u.Ridge), fmtR(u.STA))
	}
}

func fmtR(v online.Float) string {
	if math.IsNaN(float64(v)) {
		return "—"
	}
	return fmt.Sprintf("%.3f", float64(v))
}

// tokenQuery is the URL query part that hands the page its token.
func tokenQuery(token string) string {
	if token == "" {
		return ""
	}
	return "&token=" + token
}
