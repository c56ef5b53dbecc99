package online

import (
	"math"
	"testing"
)

// TestRestartLags: after RestartLags, and after a refused bin, the next
// Lags−1 bins only refill the lag history (Bins does not grow), so no bin
// is regressed on frames from before the break.
func TestRestartLags(t *testing.T) {
	m, err := NewMapper(Config{Width: 2, Height: 2, Lags: 4})
	if err != nil {
		t.Fatal(err)
	}
	m.Unit("a")
	frame := []float64{1, -1, 1, -1}
	add := func(n int) {
		for range n {
			if err := m.AddBin(frame, nil); err != nil {
				t.Fatal(err)
			}
		}
	}
	add(10)
	if m.Bins() != 7 {
		t.Fatalf("10 bins with 4 lags: %d used, want 7", m.Bins())
	}
	m.RestartLags()
	add(3)
	if m.Bins() != 7 {
		t.Fatalf("3 bins after a restart: %d used, want still 7", m.Bins())
	}
	add(1)
	if m.Bins() != 8 {
		t.Fatalf("4th bin after a restart: %d used, want 8", m.Bins())
	}
	if err := m.AddBin([]float64{1, math.NaN(), 1, 1}, nil); err == nil {
		t.Fatal("a NaN frame was accepted")
	}
	add(3)
	if m.Bins() != 8 {
		t.Fatalf("3 bins after a refused bin: %d used, want still 8", m.Bins())
	}
	add(1)
	if m.Bins() != 9 {
		t.Fatalf("4th bin after a refused bin: %d used, want 9", m.Bins())
	}
}

// TestRatePresentTime: a unit that appears half-way through a block reports
// its rate over the time it has been present, not over the whole block.
func TestRatePresentTime(t *testing.T) {
	m, err := NewMapper(Config{Width: 2, Height: 2, Lags: 1, FramePeriod: 0.01})
	if err != nil {
		t.Fatal(err)
	}
	a := m.Unit("early")
	frame := []float64{1, -1, 1, -1}
	for k := 0; k < 2000; k++ {
		var counts []Count
		if k%10 == 0 {
			counts = append(counts, Count{Unit: a, N: 1})
			if k >= 1000 {
				counts = append(counts, Count{Unit: m.Unit("late"), N: 1})
			}
		}
		frame[k%4] = -frame[k%4]
		if err := m.AddBin(frame, counts); err != nil {
			t.Fatal(err)
		}
	}
	s := m.Update()
	for _, u := range s.Units {
		if math.Abs(float64(u.Rate)-10) > 1e-9 {
			t.Errorf("%s: rate %v Hz, want 10", u.ID, u.Rate)
		}
	}
}
