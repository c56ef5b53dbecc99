//go:build race

package online

// raceDetector reports a build with the race detector, which slows the
// smooth-local fits' scalar loops about thirtyfold: the simulation tests
// then check one unit of each kind and three null units instead of all.
const raceDetector = true
