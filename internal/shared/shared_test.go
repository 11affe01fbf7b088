package shared

import "testing"

// The manifest lists every matrix file with its collection metadata; the
// counts below are those of the rows in ../shared/matrices/MANIFEST.tsv.
func TestManifest(t *testing.T) {
	entries := Manifest(t)
	kinds := map[string]int{}
	for _, e := range entries {
		kinds[e.Kind]++
		if e.Rows <= 0 || e.Cols <= 0 || e.StoredEntries <= 0 {
			t.Errorf("%s: bad sizes %d×%d, %d entries", e.File, e.Rows, e.Cols, e.StoredEntries)
		}
	}
	if kinds["spd"] == 0 || kinds["least-squares"] == 0 || kinds["indefinite"] == 0 {
		t.Errorf("manifest kinds = %v; want spd, least-squares and indefinite rows", kinds)
	}
}
