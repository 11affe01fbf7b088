// Package history reads and writes convergence histories: one row per
// recorded iteration of a Krylov solve, as krylov.Progress describes it.
//
// # File formats
//
// Two formats carry the same rows; the file name's extension picks one
// (".csv" for CSV; ".json", ".jsonl" or ".ndjson" for JSON lines), and Read
// falls back to the content when the extension says nothing.
//
// CSV (RFC 4180, comma separated, no quoting needed) starts with a header
// line naming the columns, then one line per row:
//
//	iteration,elapsed_seconds,residual_norm,relative_residual
//	0,0,12.5,1
//	1,0.000412,8.0311,0.642488
//
// JSON lines holds one JSON object per line with the same keys:
//
//	{"iteration":0,"elapsed_seconds":0,"residual_norm":12.5,"relative_residual":1}
//
// The columns: iteration counts products with the operator inside the loop
// (0 is the initial residual); elapsed_seconds is wall time since the solve
// started; residual_norm is ‖b − A·x‖₂ as the method tracks it;
// relative_residual is residual_norm/‖b‖₂ (residual_norm itself when b = 0).
// Least-squares histories (Options.LeastSquares) carry a fifth column,
// normal_residual_norm, ‖Aᵀr‖₂; CG histories leave it out, because a column
// that is always zero would only mislead. Readers accept either.
//
// Numbers are written in Go's shortest form that reads back to the same
// float64 (strconv 'g', precision −1), so a write-read round trip is exact;
// elapsed_seconds round-trips to the nanosecond for any solve shorter than
// about 100 days. A NaN or infinite norm (a solve that broke down) is written
// as NaN, +Inf or -Inf in CSV and as the strings "NaN", "+Inf" and "-Inf" in
// JSON lines, since JSON has no such numbers.
//
// # Recorders
//
// Writer is a krylov.Recorder that formats each row into a buffer and writes
// the buffer out when it fills and at Finish; Create wraps it around a file
// that appears under its final name only when Close succeeds. Log is a
// krylov.Recorder that keeps the rows in memory, guarded by a mutex, so that
// another goroutine (a web page, a progress stream) can take snapshots while
// the solve runs.
//
// # Errors
//
// Malformed files give a *ParseError with the file name, the line number and
// a named reason (ErrHeader, ErrFieldCount, ErrNumber, ...). Write errors are
// returned from Record (which stops the solve) and kept for Err and Close.
// The zero Log is ready to use; the zero Writer is not (use NewWriter).
package history
