package binning_test

import (
	"fmt"

	"livefield/stream/binning"
)

// Frames at 10 Hz and two units: each bin is one frame period and carries
// the frame shown and the spikes of every unit that fired in it. A bin is
// handed out once the watermark (the latest spike, or Advance) has passed
// its end by the grace.
func ExampleBinner() {
	b, err := binning.New(binning.Config{FramePeriod: 0.1, Grace: 0.05})
	if err != nil {
		panic(err)
	}
	// Frames 0…3 at 0, 0.1, 0.2 and 0.3 s.
	if err := b.AddFrames([]int64{0, 1, 2, 3}, []float64{0, 0.1, 0.2, 0.3}); err != nil {
		panic(err)
	}
	// Unit 0 fires twice in the first bin, unit 1 once in the second; a
	// spike exactly at an onset belongs to the bin that starts there.
	b.AddSpikes([]int{0, 0, 1}, []float64{0.01, 0.05, 0.1})
	// Nothing is closed yet: the watermark, 0.1 s, has not passed the end
	// of the first bin by the grace.
	var bin binning.Bin
	fmt.Println("closed before Advance:", b.Next(&bin))
	// No spikes for a while: the rig's clock moves on anyway, to 0.26 s,
	// past 0.1 + 0.05 and 0.2 + 0.05; the third bin waits until 0.35 s.
	b.Advance(0.26)
	for b.Next(&bin) {
		fmt.Printf("frame %d [%.1f, %.1f) counts %v\n", bin.Frame, bin.Start, bin.End, bin.Counts)
	}
	// Output:
	// closed before Advance: false
	// frame 0 [0.0, 0.1) counts [{0 2}]
	// frame 1 [0.1, 0.2) counts [{1 1}]
}

// A frame left on screen for three periods (the stimulus computer dropped
// two) is split into three bins of one period that show the same frame,
// marked Held, so that lag j keeps meaning j frame periods. A spike that
// arrives after its bin has closed is counted as late, never added.
func ExampleBinner_heldFrame() {
	b, err := binning.New(binning.Config{FramePeriod: 0.1, Grace: 0.05})
	if err != nil {
		panic(err)
	}
	b.AddFrames([]int64{0, 1, 2}, []float64{0, 0.1, 0.4}) // frame 1 shows for 0.3 s
	b.AddSpikes([]int{0}, []float64{0.25})
	if err := b.End(0.5); err != nil {
		panic(err)
	}
	b.Flush() // the block ended: close every bin whose end is known
	var bin binning.Bin
	for b.Next(&bin) {
		fmt.Printf("frame %d [%.1f, %.1f) held %v counts %v\n", bin.Frame, bin.Start, bin.End, bin.Held, bin.Counts)
	}
	b.AddSpikes([]int{0}, []float64{0.15}) // too late: its bin was handed out
	st := b.Stats()
	fmt.Println("held frames:", st.HeldFrames, "held bins:", st.HeldBins, "late spikes:", st.LateSpikes)
	// Output:
	// frame 0 [0.0, 0.1) held false counts []
	// frame 1 [0.1, 0.2) held true counts []
	// frame 1 [0.2, 0.3) held true counts [{0 1}]
	// frame 1 [0.3, 0.4) held true counts []
	// frame 2 [0.4, 0.5) held false counts []
	// held frames: 1 held bins: 3 late spikes: 1
}
