package precond

import "fmt"

// Kind names a preconditioner. Its values are the stable lower-case names
// used on the command line, in JSON output and on the wire.
type Kind string

// The kinds. Their names carry the Kind prefix because the preconditioner
// types Jacobi and IC0 take the plain names.
const (
	// KindNone: no preconditioner; CG runs unpreconditioned.
	KindNone Kind = "none"
	// KindJacobi: the inverse of A's diagonal (type Jacobi).
	KindJacobi Kind = "jacobi"
	// KindIC0: zero-fill incomplete Cholesky, IC(0) (type IC0).
	KindIC0 Kind = "ic0"
	// KindAuto: chosen from the matrix by the rule in the package
	// documentation.
	KindAuto Kind = "auto"
	// KindBlock: the block-diagonal preconditioner of a saddle-point matrix
	// with a zero (2,2) block (type BlockDiagonal), for MINRES.
	KindBlock Kind = "block"
	// KindAMG: smoothed-aggregation algebraic multigrid, one V-cycle per
	// application (package precond/amg).
	KindAMG Kind = "amg"
)

// Kinds lists every kind in the order the documentation gives them.
var Kinds = []Kind{KindNone, KindJacobi, KindIC0, KindAMG, KindAuto, KindBlock}

// ParseKind returns the Kind named s. It accepts exactly the names above
// and returns an error that lists them for anything else.
func ParseKind(s string) (Kind, error) {
	for _, k := range Kinds {
		if s == string(k) {
			return k, nil
		}
	}
	return "", fmt.Errorf("precond: unknown preconditioner %q (want one of none, jacobi, ic0, amg, auto, block)", s)
}
