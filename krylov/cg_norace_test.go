//go:build !race

package krylov_test

// cgRace reports a build with the race detector (see cg_race_test.go).
const cgRace = false
