package main

import (
	"bytes"
	"encoding/json"
	"io"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/residua/residua/internal/shared"
)

// inspect's verdict agrees with the collection-derived manifest
// (../shared/matrices/MANIFEST.tsv, whose rows, cols and stored entries
// match the collection's own index files): dimensions and stored entries
// equal the manifest's; kind spd ⇒ symmetric with positive diagonal;
// nonsymmetric ⇒ not symmetric; least-squares ⇒ rectangular, so not
// symmetric; indefinite ⇒ symmetric, with positive_diagonal false exactly
// where the manifest's spd column says diagonal entries are zero or
// negative.
func TestInspectAgreesWithManifest(t *testing.T) {
	dir := shared.Matrices(t)
	var files []string
	var entries []shared.Entry
	for _, e := range shared.Manifest(t) {
		if e.Kind == "rhs" || e.Kind == "solution" {
			continue
		}
		files = append(files, e.Path(dir))
		entries = append(entries, e)
	}
	stdout, stderr, code := runCLI(t, append([]string{"inspect", "--json"}, files...)...)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	dec := json.NewDecoder(strings.NewReader(stdout))
	for _, e := range entries {
		var got struct {
			File                string
			Rows, Cols, Entries int
			Symmetric           bool
			PositiveDiagonal    bool `json:"positive_diagonal"`
			Verdict             string
			HeaderSymmetry      string `json:"header_symmetry"`
		}
		if err := dec.Decode(&got); err != nil {
			t.Fatalf("%s: %v", e.File, err)
		}
		if got.File != e.Path(dir) {
			t.Fatalf("object for %s, want %s", got.File, e.Path(dir))
		}
		if got.Rows != e.Rows || got.Cols != e.Cols || got.Entries != e.StoredEntries || got.HeaderSymmetry != e.Symmetry {
			t.Errorf("%s: %d×%d, %d entries, %s; manifest %d×%d, %d, %s", e.File, got.Rows, got.Cols, got.Entries, got.HeaderSymmetry,
				e.Rows, e.Cols, e.StoredEntries, e.Symmetry)
		}
		switch e.Kind {
		case "spd":
			if !got.Symmetric || !got.PositiveDiagonal || !strings.Contains(got.Verdict, "CG can be tried") {
				t.Errorf("%s (spd): symmetric %v, positive diagonal %v, verdict %q", e.File, got.Symmetric, got.PositiveDiagonal, got.Verdict)
			}
		case "nonsymmetric", "least-squares":
			if got.Symmetric || strings.Contains(got.Verdict, "CG can be tried") {
				t.Errorf("%s (%s): symmetric %v, verdict %q", e.File, e.Kind, got.Symmetric, got.Verdict)
			}
		case "indefinite":
			if !got.Symmetric {
				t.Errorf("%s (indefinite, symmetric storage): reported not symmetric", e.File)
			}
			// The manifest's spd column says, in words, which indefinite
			// matrices have zero or negative diagonal entries.
			spd := strings.ToLower(e.SPD)
			badDiag := strings.Contains(spd, "diagonal entries negative") || strings.Contains(spd, "zero diagonal") ||
				strings.Contains(spd, "negative diagonal")
			goodDiag := strings.Contains(spd, "diagonal entry is positive") || strings.Contains(spd, "diagonal is positive")
			if badDiag == goodDiag {
				t.Fatalf("%s: the manifest's spd text %q says nothing clear about the diagonal", e.File, e.SPD)
			}
			if got.PositiveDiagonal != goodDiag {
				t.Errorf("%s: positive_diagonal %v, manifest says %q", e.File, got.PositiveDiagonal, e.SPD)
			}
		default:
			t.Errorf("%s: unknown kind %q", e.File, e.Kind)
		}
	}
}

// Malformed or unreadable files exit 2 with the file and line on stderr;
// the readable ones are still reported.
func TestInspectMalformed(t *testing.T) {
	dir := t.TempDir()
	cases := []struct {
		name, text, want string
	}{
		// Matrix Market format definition (NIST 1996): the banner's field
		// is real, integer, complex or pattern; residua refuses complex.
		{"complex.mtx", "%%MatrixMarket matrix coordinate complex general\n1 1 1\n1 1 1 0\n", "complex.mtx:1"},
		// Indices are 1-based.
		{"zero-index.mtx", "%%MatrixMarket matrix coordinate real general\n2 2 1\n0 1 1.0\n", "zero-index.mtx:3"},
		// The size line declares 3 entries, the file holds 2.
		{"truncated.mtx", "%%MatrixMarket matrix coordinate real general\n2 2 3\n1 1 1.0\n2 2 1.0\n", "truncated.mtx:"},
		{"nan.mtx", "%%MatrixMarket matrix coordinate real general\n% a comment\n2 2 1\n1 1 NaN\n", "nan.mtx:4"},
	}
	var paths []string
	for _, c := range cases {
		p := filepath.Join(dir, c.name)
		if err := os.WriteFile(p, []byte(c.text), 0o644); err != nil {
			t.Fatal(err)
		}
		paths = append(paths, p)
	}
	good := filepath.Join(dir, "good.mtx")
	os.WriteFile(good, []byte("%%MatrixMarket matrix coordinate real symmetric\n2 2 2\n1 1 4\n2 2 5\n"), 0o644)
	for i, c := range cases {
		_, stderr, code := runCLI(t, "inspect", paths[i])
		if code != exitUsage || !strings.Contains(stderr, c.want) {
			t.Errorf("%s: exit %d, stderr %q, want exit 2 naming %q", c.name, code, stderr, c.want)
		}
	}
	stdout, stderr, code := runCLI(t, "inspect", paths[0], good, filepath.Join(dir, "absent.mtx"))
	if code != exitUsage || !strings.Contains(stdout, "good.mtx") || !strings.Contains(stdout, "CG can be tried") ||
		!strings.Contains(stderr, "complex.mtx:1") || !strings.Contains(stderr, "absent.mtx") {
		t.Errorf("mixed: exit %d\nstdout %s\nstderr %s", code, stdout, stderr)
	}
}

// The plain report names the worst pair of a nonsymmetric matrix, 1-based
// as in the file.
func TestInspectWorstPair(t *testing.T) {
	dir := t.TempDir()
	p := filepath.Join(dir, "a.mtx")
	os.WriteFile(p, []byte("%%MatrixMarket matrix coordinate real general\n3 3 4\n1 1 2\n2 2 2\n3 3 2\n3 2 3.5\n"), 0o644)
	var out bytes.Buffer
	err := run(t.Context(), []string{"inspect", p}, nil, &out, io.Discard)
	if err != nil {
		t.Fatal(err)
	}
	if want := "not symmetric: a(3,2) = 3.5 but a(2,3) = 0"; !strings.Contains(out.String(), want) {
		t.Errorf("report lacks %q:\n%s", want, out.String())
	}
}

// TestInspectWords: inspect speaks only of what applies. A rectangular
// matrix has no diagonal or dominance lines; a diagonal's faults name only
// the kinds that occur (saylr3: all 1000 diagonal entries negative, from
// the collection's file); a positive diagonal is said not to prove
// positive definiteness, since an SPD matrix needs one but the converse
// fails (Golub and Van Loan, 4th ed., §4.2; bcsstm10 has a positive
// diagonal and CG breaks down on it).
func TestInspectWords(t *testing.T) {
	out, _, code := runCLI(t, "inspect", sharedMatrix(t, "illc1033.mtx"))
	if code != 0 || strings.Contains(out, "diagonal ") || strings.Contains(out, "dominance") {
		t.Errorf("rectangular: exit %d, diagonal or dominance shown:\n%s", code, out)
	}
	out, _, _ = runCLI(t, "inspect", sharedMatrix(t, "saylr3.mtx"))
	if !strings.Contains(out, "1000 negative entries") || strings.Contains(out, "0 zero") {
		t.Errorf("saylr3: faults not named as they occur:\n%s", out)
	}
	out, _, _ = runCLI(t, "inspect", sharedMatrix(t, "bcsstm10.mtx"))
	if !strings.Contains(out, "does not prove A positive definite") {
		t.Errorf("bcsstm10: the verdict claims more than a positive diagonal shows:\n%s", out)
	}
}
