//go:build !race

package client_test

// longSolutionGrid is the Poisson3D grid of TestLongSolution: 100³ = 10⁶
// entries (see race_on_test.go for the race detector's smaller one).
const longSolutionGrid = 100
