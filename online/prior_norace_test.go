//go:build !race

package online

// raceDetector reports a build with the race detector (see
// prior_race_test.go).
const raceDetector = false
