//go:build !race

package krylov

// raceBuild reports a build with the race detector (see race_on_internal_test.go).
const raceBuild = false
