//go:build race

package online

// raceEnabled is true under the race detector, which slows the long
// calibration blocks about sixfold; they then run their short variants.
const raceEnabled = true
