package online

// lookState is one unit's place in the sequence of looks (see Look).
type lookState struct {
	look        int     // looks taken
	significant bool    // a look has rejected the null
	threshold   float64 // α_j of the last look taken
}
