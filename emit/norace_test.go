//go:build !race

package emit

// raceDetector says that the tests run under the race detector.
const raceDetector = false
