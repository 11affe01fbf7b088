// Package solve is the one layer between residua's methods (package krylov,
// with the preconditioners of package precond) and its front ends (the
// command line, the gRPC server, the watch page and the Go client). It
// holds the vocabulary they share and the one path from a request to an
// outcome:
//
//   - Method and ParseMethod: the method names, parsed once.
//   - Request and Request.Validate: what a user asks for, checked once (the
//     CLI's flags, the server's SolveRequest and the client's request all
//     become a Request), with zero meaning "the default" for every number.
//   - Prepare, Setup.Solve and Run: check the matrix against the method,
//     choose the preconditioner or column scaling and say why, time the
//     set-up, run the method and describe the outcome. A Setup holds the
//     request it was made for; Setup.For reuses its preconditioner for
//     another request's tolerances and limits (the server's set-up cache).
//   - Summary: the outcome of one solve, whose JSON encoding is the schema
//     documented in the README (the CLI's --json, the client's result, the
//     server's result message through package wire, and the page's jobs).
//   - MINRES for a symmetric matrix that is not positive definite: asked
//     for (MINRES), or chosen by Auto from the diagonal's signs or a CG
//     breakdown, with Summary.MethodReason saying why (minres.go).
//   - PrepareNormal: the normal equations (B·diag(d)·Bᵀ + δI)·y = r with new
//     weights every solve, matrix-free, the pattern of B·Bᵀ kept in a
//     NormalCache for IC(0) (normal.go).
//   - State and Outcome: the words for where a job is (queued, running,
//     done) and how a solve ended (converged, iteration-limit, ...,
//     setup-failed), used verbatim by every front end, the logs and the
//     metrics labels.
//
// Numbers in JSON: a NaN or infinite value is written as the string "NaN",
// "+Inf" or "-Inf" (type Num), the same spelling as the history files; a
// value that does not exist (a field of the other method, an estimate not
// made) is left out.
package solve
