//go:build race

package precond_test

// raceEnabled: the race detector slows the solves about tenfold, so the
// shared-matrix tests leave out the slowest matrices under it.
const raceEnabled = true
