// Package ingest runs the live mapping of one rig: it reads the rig's block,
// frames, spikes and control messages from NATS (JetStream or core), bins
// them, feeds an online.Mapper per block and publishes an immutable
// online.Snapshot at most once per second of wall time. Load costs
// freshness, never data: the message path only decodes and bins, and the
// estimates trail the stream (Health.StreamLag) while the estimator catches
// up, each update folding in every bin that has queued up, exactly.
//
// # What it owns
//
// A Loop (NewLoop) is the NATS-free core, in two parts joined by an
// unbounded, ordered event queue. The intake, fed messages one at a time
// with their arrival times (Feed), owns the decoder, the running block's
// binning.Binner and the unit numbering, and queues closed bins, new units,
// block starts and ends and controls. The estimator owns the block's
// online.Mapper: it applies the events in order (AddBin only adds to the
// sufficient statistics) and updates at most once per UpdateEvery; the
// mapper picks the route of each update (a block RLS update for a few
// bins, one exact re-solve from the Gram matrix for many). In a Loop made
// by NewLoop the estimator runs inline on the feeding goroutine, paced by
// the arrival times (replay, export: deterministic). replay.Feeder is such
// a Loop behind a lock.
//
// A Rig, made by Start, feeds a Loop from NATS through a bounded queue to
// the intake goroutine, and runs the estimator on a goroutine of its own.
// Spikes and frames are aligned by their payload
// times (the binner's watermark and grace), never by arrival order.
// Several Rigs with different prefixes may share one *nats.Conn and never
// see each other's messages.
//
// # Durable and core NATS
//
// With Options.Durable the Rig creates or updates the rig's stream
// (StreamConfig: subjects Prefix+".>", file storage, 12 h / 6 GiB) and
// replaces its durable consumer (ConsumerName, one per shard; AckAll,
// acknowledged every 256 messages and every 50 ms after processing). The
// consumer starts at the current block's start: the last message on
// Prefix+".block" when it is a start, the one after it when it is an end,
// the next stored message when there is none. A mapper restarted mid-block
// therefore rebuilds the block from its start, in stream order, as an
// uninterrupted one did. The owner admits only the stream sequence after
// the last processed one: redeliveries are skipped and counted
// (Health.Duplicates); a gap (messages lost in flight across a server
// restart) recreates the consumer at the first missing sequence
// (Health.Resyncs). The consumer's delivery goroutine waits for room in
// the queue instead of dropping.
//
// Without it the Rig subscribes to Prefix+".*" on core NATS, with pending
// limits DefaultPendingMsgs and DefaultPendingBytes; Health.Warning says
// that messages sent during a disconnect are lost.
//
// # Shards
//
// Options.Shard{Index: i, Count: n} maps only the units whose ShardOf (the
// FNV-1a-32 hash of the id, mod n) is i. Frames, block and control
// messages are read by every shard; other shards' spikes are counted
// (Health.OtherShardSpikes), not rejected, and still move the binner's
// watermark, so bins close as they would in one worker.
//
// # Goroutines
//
//   - A Loop is fed by one goroutine at a time (Feed, Advance, Update,
//     Finish, Reset, FlagSTC, SetCriterion); Snapshot, Health
//     and EvidenceOf may be called from any goroutine. Options.OnUpdate and
//     OnBlockEnd run on the estimator's goroutine (the feeding goroutine of
//     a NewLoop).
//   - A Rig's NATS delivery goroutine only counts the message and hands it
//     to the queue (Options.Queue messages); when the queue is full it
//     waits, and nats.go holds the messages up to its pending limits, the
//     only place where core NATS can drop (counted: slow_consumer_drops,
//     with slow_consumer_events). livefield itself drops nothing.
//   - The intake goroutine decodes, bins, numbers units and acknowledges;
//     the estimator goroutine folds bins in and updates. Both run until
//     the context of Start ends or Close is called, which also cancels the
//     evidence fits and waits for all of them.
//   - Any goroutine may call a Rig's Snapshot, Health, Reset,
//     FlagSTC, SetCriterion, Sync, WaitProcessed and Close. Snapshot is an
//     atomic load; the commands run on the intake goroutine and wait for it.
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
