//go:build race

package krylov_test

// cgRace reports a build with the race detector, which slows the solves
// about tenfold: the sweep over the shared matrices then keeps to the small
// ones.
const cgRace = true
