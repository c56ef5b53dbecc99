package online

// AssembleSnapshot returns a Snapshot with the fields of head (its details
// ignored) and the given unit details, found by Detail under their IDs. It
// lets a reader that gathers estimates from several mappers (the shards of
// one rig) publish them as one picture; details may be a subset of the
// units. Neither head nor details may be changed afterwards.
func AssembleSnapshot(head Snapshot, details []*UnitDetail) *Snapshot {
	head.details = make(map[string]*UnitDetail, len(details))
	for _, d := range details {
		if d != nil {
			head.details[d.ID] = d
		}
	}
	return &head
}
