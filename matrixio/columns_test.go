package matrixio

import (
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// TestColumns: several right-hand sides in one file. The array format
// lists its values column after column (Boisvert, Pozo and Remington, The
// Matrix Market Exchange Formats, NIST, 1996, §2), so the 3×2 array below
// holds the columns (1, 2, 3) and (4, 5, 6); a coordinate file gives the
// same columns with absent entries zero; a 1×n row is one right-hand side.
// Written columns read back bitwise.
func TestColumns(t *testing.T) {
	dir := t.TempDir()
	write := func(name, text string) string {
		p := filepath.Join(dir, name)
		if err := os.WriteFile(p, []byte(text), 0o644); err != nil {
			t.Fatal(err)
		}
		return p
	}
	cases := []struct {
		name, text string
		want       [][]float64
	}{
		{"array", "%%MatrixMarket matrix array real general\n3 2\n1\n2\n3\n4\n5\n6\n", [][]float64{{1, 2, 3}, {4, 5, 6}}},
		{"coordinate", "%%MatrixMarket matrix coordinate real general\n3 2 3\n1 1 1\n3 1 3\n2 2 5\n", [][]float64{{1, 0, 3}, {0, 5, 0}}},
		{"row", "%%MatrixMarket matrix array real general\n1 3\n7\n8\n9\n", [][]float64{{7, 8, 9}}},
		{"vector", "%%MatrixMarket matrix array real general\n3 1\n7\n8\n9\n", [][]float64{{7, 8, 9}}},
	}
	for _, c := range cases {
		got, _, err := ReadColumnsFile(write(c.name+".mtx", c.text), nil)
		if err != nil {
			t.Fatalf("%s: %v", c.name, err)
		}
		if len(got) != len(c.want) {
			t.Fatalf("%s: %d columns, want %d", c.name, len(got), len(c.want))
		}
		for j := range got {
			for i := range got[j] {
				if got[j][i] != c.want[j][i] {
					t.Errorf("%s: (%d,%d) = %g, want %g", c.name, i+1, j+1, got[j][i], c.want[j][i])
				}
			}
		}
	}
	cols := [][]float64{{0.1, -2.5e-300, math.Pi}, {1, 2, 3}, {math.Nextafter(1, 2), 0, -7}}
	p := filepath.Join(dir, "out.mtx.gz")
	if err := WriteColumnsFile(p, cols); err != nil {
		t.Fatal(err)
	}
	back, _, err := ReadColumnsFile(p, nil)
	if err != nil {
		t.Fatal(err)
	}
	for j := range cols {
		for i := range cols[j] {
			if math.Float64bits(back[j][i]) != math.Float64bits(cols[j][i]) {
				t.Errorf("round trip (%d,%d): %v, want %v", i+1, j+1, back[j][i], cols[j][i])
			}
		}
	}
	var sb strings.Builder
	if err := WriteColumns(&sb, [][]float64{{1}, {math.NaN()}}); err == nil || !strings.Contains(err.Error(), "x(1,2)") || sb.Len() != 0 {
		t.Errorf("NaN: err %v, wrote %q", err, sb.String())
	}
}
