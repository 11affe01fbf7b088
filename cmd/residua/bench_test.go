package main

import (
	"encoding/json"
	"testing"
)

// bench reports both bandwidths and their ratio; the byte counts follow
// the documented minimum traffic (12 per nonzero, 8 per row pointer, 16 per
// row for SpMV; 24 per element for the triad). No timing is asserted.
func TestBench(t *testing.T) {
	stdout, stderr, code := runCLI(t, "bench", "--size", "10", "--repeat", "2", "--json")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	var r benchResult
	if err := json.Unmarshal([]byte(stdout), &r); err != nil {
		t.Fatal(err)
	}
	// 7-point Poisson on 10³ points: 7·10³ − 6·10² nonzeros (LeVeque §3.4:
	// each of the 6·10² boundary faces loses one neighbour).
	if r.Rows != 1000 || r.Nonzeros != 6400 || r.SpMVBytes != 12*6400+8*1001+16*1000 || r.TriadBytes < r.SpMVBytes {
		t.Errorf("%+v", r)
	}
	if !(r.SpMVGBs > 0 && r.TriadGBs > 0 && r.SpMVOverTriad > 0) {
		t.Errorf("non-positive figures: %+v", r)
	}
}
