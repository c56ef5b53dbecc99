// Package wire owns the messages a recording rig publishes for livefield:
// their Go types, a strict decoder for each and encoders for publishers.
// It does no I/O.
//
// # Subjects
//
// Every subject sits under a prefix, by default "livefield.<rig>" (Prefix):
//
//	<prefix>.block    block start and end (Block)
//	<prefix>.frames   frame onsets (Frames)
//	<prefix>.spikes   spikes (Spikes)
//	<prefix>.control  commands from the experimenter (Control)
//
// All times are seconds on the acquisition clock, shared by spikes and
// frames.
//
// # Strictness
//
// Messages are JSON (RFC 8259). A message is accepted whole or rejected
// whole: no partly filled value is ever returned. Keys are matched exactly
// (case-sensitive). A key that repeats a known key is rejected, and so is an
// unknown key equal to a known one up to Unicode case folding (encoding/json
// would have read it as that field); other unknown keys are skipped, so that
// rigs may add fields. null is not accepted for any field. Strings must be
// valid UTF-8 with paired surrogates. Within one frames message index and t
// strictly increase; within one spikes message t never decreases.
//
// # Rejection reasons
//
// Every rejection is an *Error whose Reason is one of these stable strings
// (see errors.As), suitable as a counter key:
//
//	too-large         message longer than Decoder.MaxSize (default 1 MiB)
//	syntax            not well-formed JSON, bad UTF-8 or a lone surrogate
//	trailing-data     anything but white space after the message object
//	too-deep          a value (stimulus or unknown field) nested deeper
//	                  than 32 levels
//	wrong-type        a field of the wrong JSON type (null included), or an
//	                  index that is not an integer or overflows int64
//	duplicate-key     a known key given twice in one object
//	case-key          a key equal to a known key only up to case
//	missing-field     a required field is absent
//	unexpected-field  a field that this kind or command does not take
//	non-finite        a number too large for float64 (1e400)
//	negative-time     a time below zero
//	time-order        times running backwards within one message (for
//	                  frames also two equal onsets)
//	length-mismatch   parallel arrays of unequal length
//	bad-unit          a unit id empty or longer than 64 bytes
//	bad-block         a block id empty or longer than 64 bytes
//	negative-index    a frame index below zero
//	index-order       frame indices not strictly increasing in a message
//	unknown-kind      a block kind other than "start" and "end"
//	unknown-command   a control command this version does not know
//	bad-stimulus      a start whose stimulus is not a JSON object
//	bad-lags          lags not an integer in 1…64
//	bad-frame-period  frame_period not in (0, 10] seconds
//	bad-geometry      geometry without both lengths positive and finite
//	bad-criterion     a criterion target or fraction outside (0, 1]
//
// # Concurrency
//
// The Decode and Encode functions are safe for concurrent use. A Decoder
// keeps scratch space and an intern table of unit ids, so one goroutine (the
// subscriber that owns it) uses it at a time; its SpikesTo and FramesTo reuse
// the caller's slices and do not allocate in steady state.
package wire
