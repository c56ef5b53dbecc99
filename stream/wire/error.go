package wire

// The rejection reasons. Each is a stable, short string meant as a counter
// key; the package documentation explains each one.
const (
	ReasonTooLarge        = "too-large"
	ReasonSyntax          = "syntax"
	ReasonTrailing        = "trailing-data"
	ReasonTooDeep         = "too-deep"
	ReasonWrongType       = "wrong-type"
	ReasonDuplicateKey    = "duplicate-key"
	ReasonCaseKey         = "case-key"
	ReasonMissingField    = "missing-field"
	ReasonUnexpectedField = "unexpected-field"
	ReasonNonFinite       = "non-finite"
	ReasonNegativeTime    = "negative-time"
	ReasonTimeOrder       = "time-order"
	ReasonLengthMismatch  = "length-mismatch"
	ReasonBadUnit         = "bad-unit"
	ReasonBadBlock        = "bad-block"
	ReasonNegativeIndex   = "negative-index"
	ReasonIndexOrder      = "index-order"
	ReasonUnknownKind     = "unknown-kind"
	ReasonUnknownCommand  = "unknown-command"
	ReasonBadStimulus     = "bad-stimulus"
	ReasonBadLags         = "bad-lags"
	ReasonBadFramePeriod  = "bad-frame-period"
	ReasonBadGeometry     = "bad-geometry"
	ReasonBadCriterion    = "bad-criterion"
)

// Reasons lists every rejection reason, in the order of the table in the
// package documentation, so that counters can be registered up front.
var Reasons = []string{
	ReasonTooLarge, ReasonSyntax, ReasonTrailing, ReasonTooDeep,
	ReasonWrongType, ReasonDuplicateKey, ReasonCaseKey, ReasonMissingField,
	ReasonUnexpectedField, ReasonNonFinite, ReasonNegativeTime,
	ReasonTimeOrder, ReasonLengthMismatch, ReasonBadUnit, ReasonBadBlock,
	ReasonNegativeIndex, ReasonIndexOrder, ReasonUnknownKind,
	ReasonUnknownCommand, ReasonBadStimulus, ReasonBadLags,
	ReasonBadFramePeriod, ReasonBadGeometry, ReasonBadCriterion,
}

// Error is a rejected message (or a value that cannot be encoded). Reason
// is one of the Reason constants; Detail says which field and where.
type Error struct {
	Reason string
	Detail string
}

func (e *Error) Error() string {
	if e.Detail == "" {
		return "wire: " + e.Reason
	}
	return "wire: " + e.Reason + ": " + e.Detail
}
