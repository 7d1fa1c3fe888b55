//go:build race

package emit

// raceDetector says that the tests run under the race detector, whose
// shadow memory and slower steps make the census of [1, 2^30) too large.
const raceDetector = true
