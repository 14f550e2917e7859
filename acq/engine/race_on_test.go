//go:build race

package engine_test

// raceDetector is true when the tests are built with -race, which slows the
// program several times over.
const raceDetector = true
