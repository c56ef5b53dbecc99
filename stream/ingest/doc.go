// Package ingest runs the live mapping of one rig: it reads the rig's block,
// frames, spikes and control messages from NATS, bins them, feeds an
// online.Mapper per block and publishes an immutable online.Snapshot once
// per second of wall time.
//
// # What it owns
//
// A Rig, made by Start, owns for its rig prefix: the subscription to
// Prefix+".*" (block, frames, spikes, control), a bounded queue to one owner
// goroutine, and for the running block the stimulus Source, the
// binning.Binner and the online.Mapper. Spikes and frames are aligned by
// their payload times (the binner's watermark and grace), never by arrival
// order. Several Rigs with different prefixes may share one *nats.Conn and
// never see each other's messages.
//
// # Goroutines
//
//   - The NATS delivery goroutine of the subscription only counts the
//     message and hands it to the queue (Options.Queue messages); when the
//     queue stays full for 200 ms the message is dropped and counted as
//     "queue-full". nats.go's own pending limits come before that and count
//     their drops (Subscription.Dropped, shown as slow_consumer_drops).
//   - The owner goroutine decodes, bins and estimates, and is the only one
//     that touches the Mapper and the Binner. It runs until the context of
//     Start ends or Close is called.
//   - Any goroutine may call Snapshot, Health, Counters, Reset, FlagSTC,
//     SetCriterion, Sync and Close. Snapshot is an atomic load; the commands
//     run on the owner goroutine and wait for it.
//
// # Blocks
//
// A block start opens the stimulus named by its spec (movies from
// Options.StimuliDir), a Binner and a Mapper (size from the stimulus; lags,
// frame period and geometry from the message; White and PixelVariance from
// the Source). A start that cannot be opened is rejected, its reason kept in
// Health.BlockError, and the running block goes on. A valid start ends the
// running block. A block end flushes the last bins and publishes a final
// update, which stays visible until the next block starts.
//
// # Rejections
//
// A message that cannot be used changes no estimate: it is counted under a
// reason (the wire package's reasons for decoding, the Reason constants here
// for the rest) and logged at most once per reason every 5 s. The rig keeps
// running.
package ingest
