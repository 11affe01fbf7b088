package main

import (
	"encoding/json"
	"strings"
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

// The text ends with a verdict sentence, and a problem that fits in the
// last-level cache is said to show the cache's speed (10³ rows are far
// smaller than any last-level cache).
func TestBenchVerdict(t *testing.T) {
	stdout, _, code := runCLI(t, "bench", "--size", "10", "--repeat", "2")
	if code != 0 || !strings.Contains(stdout, "\nverdict: SpMV gets") || !strings.Contains(stdout, "fits in") {
		t.Errorf("exit %d:\n%s", code, stdout)
	}
	for _, c := range []struct {
		ratio float64
		want  string
	}{{0.95, "near the memory roofline"}, {0.6, "below the memory roofline"}, {0.2, "slow here"}} {
		if got := benchVerdict(c.ratio); !strings.Contains(got, c.want) {
			t.Errorf("ratio %g: %q", c.ratio, got)
		}
	}
}
