package session_test

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"time"

	"livefield/replay/session"
)

func Example() {
	var file bytes.Buffer
	w, err := session.NewWriter(&file, session.Header{Rig: "rig1", Prefix: "livefield.rig1"})
	if err != nil {
		panic(err)
	}
	at := time.Date(2026, 5, 1, 9, 0, 0, 0, time.UTC)
	w.Write(session.Record{At: at, Subject: "spikes", Data: []byte(`{"unit":["7"],"t":[0.5]}`)})
	w.Write(session.Record{At: at.Add(time.Second), Subject: "control", Data: []byte(`{"command":"reset"}`)})
	w.Close()

	r, err := session.NewReader(&file)
	if err != nil {
		panic(err)
	}
	fmt.Println("rig", r.Header().Rig)
	for {
		rec, err := r.Next()
		if err == io.EOF {
			break
		}
		var bad *session.CorruptError
		if errors.As(err, &bad) {
			fmt.Println("skipped damage at byte", bad.Offset)
			continue
		}
		fmt.Println(rec.At.UTC().Format(time.TimeOnly), rec.Subject, string(rec.Data))
	}
	// Output:
	// rig rig1
	// 09:00:00 spikes {"unit":["7"],"t":[0.5]}
	// 09:00:01 control {"command":"reset"}
}
