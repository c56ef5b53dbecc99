package stimulus

import (
	"fmt"
	"math"
	"math/bits"
)

const (
	golden = 0x9E3779B97F4A7C15
	mix1   = 0xBF58476D1CE4E5B9
	mix2   = 0x94D049BB133111EB
)

// SplitMix64 returns output number n (from 0) of SplitMix64 seeded with
// seed (Steele, Lea & Flood 2014).
func SplitMix64(seed, n uint64) uint64 {
	z := seed + (n+1)*golden
	z = (z ^ (z >> 30)) * mix1
	z = (z ^ (z >> 27)) * mix2
	return z ^ (z >> 31)
}

// pick is floor(x·m / 2^64).
func pick(x, m uint64) uint64 {
	hi, _ := bits.Mul64(x, m)
	return hi
}

// noise is a procedural source; kind selects the rule.
type noise struct {
	kind     string
	w, h     int
	seed     uint64
	c        float64
	squares  int
	size     int
	variance float64
}

func newNoise(s Spec) *noise {
	n := &noise{kind: s.Type, w: s.Width, h: s.Height, seed: s.Seed, c: s.contrast()}
	switch s.Type {
	case Binary:
		n.variance = n.c * n.c
	case Ternary:
		n.variance = n.c * n.c * 2 / 3
	case Sparse:
		n.squares, n.size = s.squares(), s.size()
		m := float64((n.w / n.size) * (n.h / n.size))
		n.variance = n.c * n.c * -math.Expm1(float64(n.squares)*math.Log1p(-1/m))
	}
	return n
}

func (n *noise) Width() int             { return n.w }
func (n *noise) Height() int            { return n.h }
func (n *noise) Frames() int64          { return -1 }
func (n *noise) White() bool            { return n.kind != Sparse || n.size == 1 }
func (n *noise) PixelVariance() float64 { return n.variance }

func (n *noise) FrameTo(dst []float64, f int64) error {
	p := n.w * n.h
	if len(dst) != p {
		return fmt.Errorf("stimulus: frame buffer has %d values, want %d×%d = %d", len(dst), n.w, n.h, p)
	}
	if f < 0 {
		return fmt.Errorf("stimulus: frame %d: %w", f, ErrFrameRange)
	}
	c := n.c
	switch n.kind {
	case Binary:
		base := uint64(f) * uint64(p)
		z := n.seed + (base+1)*golden
		pm := [2]float64{-c, c}
		for i := range dst {
			x := z
			x = (x ^ (x >> 30)) * mix1
			x = (x ^ (x >> 27)) * mix2
			x ^= x >> 31
			dst[i] = pm[x>>63] // bit 63 set: +c

			z += golden
		}
	case Ternary:
		base := uint64(f) * uint64(p)
		for i := range dst {
			dst[i] = float64(int(pick(SplitMix64(n.seed, base+uint64(i)), 3))-1) * c
		}
	case Sparse:
		clear(dst)
		s, k := n.size, uint64(n.squares)
		across := uint64(n.w / s)
		m := across * uint64(n.h/s)
		base := 2 * uint64(f) * k
		for j := uint64(0); j < k; j++ {
			cell := pick(SplitMix64(n.seed, base+2*j), m)
			v := -c
			if SplitMix64(n.seed, base+2*j+1)>>63 == 1 {
				v = c
			}
			r0, c0 := int(cell/across)*s, int(cell%across)*s
			for r := r0; r < r0+s; r++ {
				row := dst[r*n.w+c0 : r*n.w+c0+s]
				for i := range row {
					row[i] = v
				}
			}
		}
	}
	return nil
}
