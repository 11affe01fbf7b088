package hugepage

import "testing"

// Advise is a hint: whatever the kernel does with it, the array's contents
// and length are unchanged, small and empty arrays are left alone, and it
// never faults on an array whose start is not page aligned.
func TestAdviseKeepsContents(t *testing.T) {
	for _, n := range []int{0, 1, 1000, 1 << 20, 3<<20 + 17} {
		s := make([]float64, n)
		for i := range s {
			s[i] = float64(i)
		}
		Advise(s)
		if n > 1 {
			Advise(s[1:]) // not page aligned
		}
		for i, v := range s {
			if v != float64(i) {
				t.Fatalf("n=%d: s[%d] = %v after Advise", n, i, v)
			}
		}
	}
	Advise([]int32(nil))
}
