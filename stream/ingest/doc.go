// Package ingest runs the live mapping of one rig: it reads the rig's block,
// frames, spikes and control messages from NATS (JetStream or core), bins
// them, feeds an online.Mapper per block and publishes an immutable
// online.Snapshot once per second of wall time.
//
// # What it owns
//
// A Loop (NewLoop) is the NATS-free core: fed messages one at a time with
// their arrival times (Feed), it owns for the running block the stimulus
// Source, the binning.Binner and the online.Mapper, and publishes a
// snapshot once per UpdateEvery of that clock. replay.Feeder is a Loop
// behind a lock.
//
// A Rig, made by Start, feeds a Loop from NATS through a bounded queue to
// one owner goroutine. Spikes and frames are aligned by their payload
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
//     Finish, Reset, FlagSTC, SetCriterion, Totals); Snapshot, Counters
//     and Health may be called from any goroutine. Options.OnUpdate and
//     OnBlockEnd run on the feeding goroutine.
//   - A Rig's NATS delivery goroutine only counts the message and hands it
//     to the queue (Options.Queue messages). On core NATS, when the queue
//     stays full for 200 ms the message is dropped and counted as
//     "queue-full"; nats.go's own pending limits come before that and count
//     their drops (slow_consumer_drops, with slow_consumer_events).
//   - The owner goroutine decodes, bins, estimates and acknowledges, and is
//     the only one that touches the Loop. It runs until the context of
//     Start ends or Close is called.
//   - Any goroutine may call a Rig's Snapshot, Health, Counters, Reset,
//     FlagSTC, SetCriterion, Sync and Close. Snapshot is an atomic load; the
//     commands run on the owner goroutine and wait for it.
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
