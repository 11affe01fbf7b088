//go:build race

package amg_test

// raceEnabled: the race detector slows the solves about tenfold, so the
// tests use their small sizes under it.
const raceEnabled = true
