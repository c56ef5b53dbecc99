// Package shards gives one view of a rig whose units are mapped by several
// workers (`livefield serve --shard i/n`).
//
// Each worker announces itself on NATS with nats.go's service API (micro):
// the service "livefield", one instance per worker, whose metadata name the
// rig, its subject prefix, the shard "i/n" and the worker's own page. So
// $SRV.PING.livefield, $SRV.INFO.livefield and $SRV.STATS.livefield list
// every worker of every rig on the server or cluster. Its request–reply
// endpoints live under ShardSubject (outside the rig's prefix, so that the
// rig's JetStream stream does not capture them):
//
//	snapshot  the latest online.Snapshot (block, summary, unit summaries)
//	unit      {"id": …}: one unit's online.UnitDetail
//	health    the worker's ingest health
//	control   {"command": "reset" | "flag_stc" | "unflag_stc" | "criterion", "id", "target", "fraction"}
//
// A reply larger than PartSize is sent in parts: the first answer carries
// the headers Livefield-Ref and Livefield-Parts, and the asker requests the
// other parts with {"ref": …, "part": k}.
//
// View merges the shards of one rig into one display.SnapshotSource: the
// unit sets (disjoint by the hash of the unit id) are concatenated, the
// block summary and READY are computed over all units (online.Summarize),
// controls go to the shard that owns the unit (ingest.ShardOf), and a shard
// that stops answering is reported as missing in Health while its units
// keep their last estimates. Front serves the merged page of every rig that
// announces itself, with a rig selector.
package shards
