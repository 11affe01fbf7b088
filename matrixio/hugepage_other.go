//go:build !linux

package matrixio

import "unsafe"

// adviseHuge does nothing outside Linux.
func adviseHuge(p unsafe.Pointer, n uintptr) {}
