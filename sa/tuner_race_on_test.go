//go:build race

package sa

// raceOn is true when the tests run under the race detector, where the
// tuner's Monte Carlo checks use their smallest forms (the race detector
// makes each report about 10 times slower; common practice, as the
// standard library's internal/race).
const raceOn = true
