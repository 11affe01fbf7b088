//go:build !race

package precond_test

const raceEnabled = false
