package online

import (
	"fmt"
	"math"
)

// Criterion is the block's stop rule: the block is ready when Fraction of
// the significant units have reached the reliability Target. It is checked
// here and only here, for a block's Config, a control message, a page
// request and a replay alike.
type Criterion struct {
	Target   float64 `json:"target"`   // reliability each unit must reach, in (0, 1)
	Fraction float64 `json:"fraction"` // share of the significant units, in (0, 1]
}

// DefaultCriterion is the rule used when none is given.
var DefaultCriterion = Criterion{Target: 0.9, Fraction: 0.8}

// Check says what is wrong with c, or nil. A reliability of 1 is out of
// reach for any finite amount of data, so the target must stay below it.
func (c Criterion) Check() error {
	switch {
	case !(c.Target > 0 && c.Target < 1) || math.IsInf(c.Target, 0):
		return fmt.Errorf("online: criterion target %v: need a reliability above 0 and below 1", c.Target)
	case !(c.Fraction > 0 && c.Fraction <= 1):
		return fmt.Errorf("online: criterion fraction %v: need a share above 0 and at most 1", c.Fraction)
	}
	return nil
}
