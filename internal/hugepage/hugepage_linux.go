package hugepage

import "syscall"

// advise calls madvise(MADV_HUGEPAGE) on b, which the kernel honours for
// transparent huge pages in its default "madvise" mode. Errors are ignored:
// the advice is a hint.
func advise(b []byte) {
	const madvHugepage = 14
	_ = syscall.Madvise(b, madvHugepage)
}
