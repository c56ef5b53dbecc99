package ingest

import (
	"livefield/online"
	"livefield/stream/stimulus"
	"livefield/stream/wire"
)

// openStimulus parses a block start's stimulus spec and opens its source.
func openStimulus(raw []byte, dir string) (stimulus.Source, error) {
	spec, err := stimulus.ParseSpec(raw)
	if err != nil {
		return nil, err
	}
	return stimulus.Open(spec, dir)
}

func geometry(g *wire.Geometry) *online.Geometry {
	if g == nil {
		return nil
	}
	return &online.Geometry{DistanceCM: g.DistanceCM, PixelSizeCM: g.PixelSizeCM}
}

// binCounts are the late spikes and held frames of all blocks so far.
func (l *loop) binCounts() (late, held uint64) {
	late, held = l.lateBase, l.heldBase
	if l.binner != nil {
		st := l.binner.Stats()
		late += uint64(st.LateSpikes)
		held += uint64(st.HeldFrames)
	}
	return late, held
}
