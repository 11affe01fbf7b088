//go:build race

package krylov

// raceBuild reports a build with the race detector, whose runtime allocates
// on its own: allocation counts mean nothing under -race (cgRace is the same
// switch for the external test package).
const raceBuild = true
