//go:build !race

package amg_test

const raceEnabled = false
