package matrixio

import (
	"syscall"
	"unsafe"
)

// adviseHuge asks the kernel to back the n bytes at p with transparent huge
// pages where it can (madvise MADV_HUGEPAGE, which the kernel honours in its
// default "madvise" mode). It is a hint: pages already touched keep their
// size, and a refusal changes nothing but speed.
func adviseHuge(p unsafe.Pointer, n uintptr) {
	const page = 4096
	const hugePage = 2 << 20
	if n < 2*hugePage {
		return
	}
	skip := -uintptr(p) & (page - 1) // to the first page boundary
	length := (n - skip) &^ (page - 1)
	b := unsafe.Slice((*byte)(unsafe.Add(p, skip)), length)
	_ = syscall.Madvise(b, 14) // MADV_HUGEPAGE
}
