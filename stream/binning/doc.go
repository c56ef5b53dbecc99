// Package binning turns frame onsets and spike times, both on one shared
// clock in seconds, into the bins the estimators consume: one bin per frame
// period, each carrying the stimulus frame index shown and the spike count
// of every unit that fired in it.
//
// # Bins
//
// A bin is the half-open interval [onset of a frame, onset of the next
// frame); a spike exactly at an onset belongs to the bin that starts there.
// The block end (End) closes the last frame's interval.
//
// Held frames: when a frame stays on screen longer than 1.5 nominal frame
// periods (the stimulus computer dropped a frame), its interval of duration d
// is split into n = round(d/period) equal bins that all show the same frame
// index and are marked Held, so that every bin is about one period long and
// lag j keeps meaning j periods. Stats counts held frames and the extra bins.
// An interval longer than Config.MaxGap (default 10 s: a pause, not a held
// frame) gives no bins at all; its spikes are counted as GapSpikes.
//
// Frames must arrive in time order: a frame whose onset is not after the
// previous one (or is not finite) is rejected, counted, and reported by the
// error of AddFrames; the other frames of the call are still used.
//
// # Closing bins: watermark and grace
//
// Spikes arrive on another channel than frames, with another delay, so a
// bin is closed only when its spikes are known to be complete. The
// watermark is the latest spike time seen, or a later time passed to
// Advance (for quiet periods without spikes). A bin closes when its end is
// known (the next onset or the block end has arrived) and watermark ≥ end +
// Config.Grace (default 0.25 s). Flush closes every bin whose end is known
// at once. Next hands out closed bins in time order.
//
// # Where every spike goes
//
// Each spike passed to AddSpikes is counted exactly once in Stats as one of:
//   - Binned: added to an open bin (and later handed out by Next);
//   - LateSpikes: its time falls in a bin already closed; it is never added
//     to that bin; Late(unit) gives the count per unit;
//   - BeforeBlock: before the first frame onset;
//   - AfterBlock: at or after the block end;
//   - GapSpikes: inside a gap (see MaxGap);
//   - Invalid: time not finite, or unit index outside 0…Config.MaxUnits−1;
//   - Pending: still waiting for the next frame onset (see below);
//   - Overflow: more than Config.MaxPending spikes were waiting for frames
//     (frames stopped arriving while spikes went on); the excess is dropped.
//
// Spikes later than the latest known onset wait until the frame that follows
// arrives (or End), since they may belong to a held frame.
//
// # Goroutines and allocation
//
// A Binner is not safe for concurrent use: one goroutine (the ingest loop)
// calls all methods. Its buffers grow to the working size and are then
// reused: AddFrames, AddSpikes, Advance and Next do not allocate in steady
// state. Next writes into the caller's Bin, reusing its Counts slice.
package binning
