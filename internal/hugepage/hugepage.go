// Package hugepage asks the operating system to back large, freshly
// allocated arrays with huge pages before they are first written.
//
// On the virtual machines residua is measured on, the first write to each
// fresh 4 KiB page costs a page fault of several microseconds, which for a
// matrix of hundreds of megabytes outweighs parsing or assembling it; a 2 MiB
// huge page takes one fault for 512 of those. The advice is only a hint: an
// array already touched keeps its pages, a kernel that refuses changes
// nothing but speed, and outside Linux Advise does nothing.
package hugepage

import "unsafe"

// minBytes is the smallest array worth advising: two huge pages, so that at
// least one whole aligned huge page lies inside it.
const minBytes = 2 * hugePageSize

const (
	pageSize     = 4096
	hugePageSize = 2 << 20
)

// Advise hints that s's backing array should get huge pages. Call it right
// after make, before the first write. Arrays under 4 MiB are left alone.
func Advise[T any](s []T) {
	if len(s) == 0 {
		return
	}
	var zero T
	n := uintptr(len(s)) * unsafe.Sizeof(zero)
	if n < minBytes {
		return
	}
	p := unsafe.Pointer(unsafe.SliceData(s))
	skip := -uintptr(p) & (pageSize - 1) // to the first page boundary
	advise(unsafe.Slice((*byte)(unsafe.Add(p, skip)), (n-skip)&^(pageSize-1)))
}
