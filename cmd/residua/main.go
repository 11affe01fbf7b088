// Command residua solves large sparse symmetric positive definite systems and
// least-squares problems with Krylov methods, inspects and generates Matrix
// Market files, and runs or talks to the residua solver service.
//
// Run "residua help" for the commands and "residua COMMAND --help" for each
// command's flags, outputs and exit statuses. The exit statuses are:
//
//	0  success (for solve and lsq: converged)
//	1  anything else (I/O failure, server unreachable, internal error)
//	2  bad usage, or an unreadable or malformed input file
//	3  the solve stopped without converging (iteration cap, time limit,
//	   stagnation, or cancelled by SIGINT/SIGTERM)
//	4  breakdown: the matrix or the preconditioner is not positive definite,
//	   or a NaN or Inf appeared
package main

import (
	"context"
	"os"
	"os/signal"
	"syscall"
)

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	// After the first signal cancels the context, restore the default
	// handling so that a second Ctrl-C ends the process at once.
	go func() { <-ctx.Done(); stop() }()
	err := run(ctx, os.Args[1:], os.Stdin, os.Stdout, os.Stderr)
	stop()
	os.Exit(exitStatus(err, os.Stderr))
}
