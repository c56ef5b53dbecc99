// Package replay owns what is done with session files (package
// replay/session): recording a rig's messages from NATS, playing a session
// back with its original timing or at full speed, practising the decision to
// stop a mapping block, and exporting a session's final estimates.
//
// # Parts
//
//   - A Recorder (StartRecorder) subscribes to every subject of one rig and
//     appends each message to a session.Writer with its arrival time.
//   - Play reads a session and hands each record to a callback, paced by the
//     original arrival times scaled by a speed (or not at all), optionally
//     starting part-way through while keeping the block start.
//   - Feeder decodes messages, bins them and runs one online.Mapper per
//     block, without NATS; its update clock is the records' arrival time, so
//     a full-speed replay computes what the live run computed. FeedSession
//     is the full-speed pass with a progress callback; with FinalOnly the
//     estimates are updated once at each block end.
//   - Practice replays a block with the future hidden, waits for the
//     trainee's stop and finishes the block at full speed; Score, a pure
//     function of the estimates at the stop, at the end and when the block
//     rule was met, grades the decision (Report). Its HTTP endpoints are
//     display.PracticeHandler.
//   - Export runs a whole session at full speed (every bin, then one update
//     at the block end) and writes every unit's estimates as NPY and JSON
//     files and a PNG contact sheet; with ExportOptions.Poisson it keeps
//     the block's bins and adds the Poisson refinement of each unit's
//     smooth-local estimate.
//
// # Goroutines
//
// A Recorder's callback runs on the NATS delivery goroutine; Stats, Err and
// Close may be called from any goroutine. Play, Practice and Export run on
// the caller's goroutine and return when done or when the context ends.
// A Feeder is fed by one goroutine; its Snapshot, Health, Reset, FlagSTC and
// SetCriterion methods (the display.SnapshotSource interface) may be called
// from any goroutine at the same time.
package replay
