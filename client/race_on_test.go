//go:build race

package client_test

// longSolutionGrid is the Poisson3D grid of TestLongSolution. Under the race
// detector, which slows the solve about tenfold, 64³ = 262 144 entries still
// make two chunks of the server's default size and more than one upload
// message.
const longSolutionGrid = 64
