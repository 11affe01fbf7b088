package sparse

import "testing"

// TestMINRESKernels: TriadDot and Step3 against plain loops, on a length
// that spans several blocks of the worker pool (so the parallel path runs),
// bit for bit, and TriadDot's sum equals Dot on its result bit for bit.
func TestMINRESKernels(t *testing.T) {
	const n = 3*inlineWork + 5
	x, y, z, w := randVec(n, 1), randVec(n, 2), randVec(n, 3), randVec(n, 4)
	d := append([]float64(nil), z...)
	want := make([]float64, n)
	for i := range want {
		want[i] = x[i] + -0.5*z[i] + 0.25*y[i]
	}
	s := TriadDot(d, x, y, -0.5, 0.25)
	sameBits(t, "TriadDot", d, want)
	sameBit(t, "TriadDot sum", s, Dot(d, d))

	xs, ps := append([]float64(nil), x...), append([]float64(nil), y...)
	Step3(xs, ps, z, w, 0.5, -0.25, 2)
	for i := range xs {
		if xs[i] != x[i]+0.5*y[i] || ps[i] != z[i]+-0.25*y[i]+2*w[i] {
			t.Fatalf("Step3: element %d", i)
		}
	}
}
