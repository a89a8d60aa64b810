//go:build !race

package sa

// raceOn: see tuner_race_on_test.go.
const raceOn = false
