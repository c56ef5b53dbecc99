package wire

import (
	"encoding/json"
	"fmt"
	"math/rand/v2"
	"testing"
)

// spikeBatch builds a spikes message of n spikes from 40 units over 20 ms.
func spikeBatch(n int) []byte {
	r := rand.New(rand.NewPCG(1, 2))
	s := Spikes{Unit: make([]string, n), T: make([]float64, n)}
	t := 1234.5
	for i := range s.Unit {
		s.Unit[i] = fmt.Sprintf("ch%02d.%d", r.IntN(32), 1+r.IntN(2))
		t += r.Float64() * 0.02 / float64(n)
		s.T[i] = t
	}
	b, err := EncodeSpikes(s)
	if err != nil {
		panic(err)
	}
	return b
}

func BenchmarkDecodeSpikes(b *testing.B) {
	for _, n := range []int{10, 1000} {
		msg := spikeBatch(n)
		b.Run(fmt.Sprintf("n=%d", n), func(b *testing.B) {
			var d Decoder
			var s Spikes
			b.ReportAllocs()
			b.SetBytes(int64(len(msg)))
			for b.Loop() {
				if err := d.SpikesTo(&s, msg); err != nil {
					b.Fatal(err)
				}
			}
			b.ReportMetric(float64(n)*float64(b.N)/b.Elapsed().Seconds(), "spikes/s")
		})
	}
	// The standard library on the same message, for comparison.
	msg := spikeBatch(1000)
	b.Run("encoding/json/n=1000", func(b *testing.B) {
		b.ReportAllocs()
		for b.Loop() {
			var s Spikes
			if err := json.Unmarshal(msg, &s); err != nil {
				b.Fatal(err)
			}
		}
		b.ReportMetric(1000*float64(b.N)/b.Elapsed().Seconds(), "spikes/s")
	})
}

func BenchmarkEncodeSpikes(b *testing.B) {
	s, err := DecodeSpikes(spikeBatch(1000))
	if err != nil {
		b.Fatal(err)
	}
	var buf []byte
	b.ReportAllocs()
	for b.Loop() {
		buf, _ = AppendSpikes(buf[:0], &s)
	}
	b.ReportMetric(1000*float64(b.N)/b.Elapsed().Seconds(), "spikes/s")
}
