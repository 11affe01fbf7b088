// Package client is the Go client of the residua solver service: connect
// with Dial, upload a matrix once (UploadFile, UploadReader, UploadCSR),
// then solve with it as often as needed (Solve, with a progress callback),
// follow jobs (Watch), cancel them (Cancel) and fetch kept solutions
// (DownloadSolution). A simulation code needs only this package and the
// generated proto package (and sparse, to upload a *sparse.CSR).
//
// Vectors travel as packed little-endian float64 bytes (Pack, Unpack);
// Solve sends short right-hand sides inline and uploads long ones first,
// so no message nears gRPC's 4 MiB limit. Uploads go in chunks of
// WithChunkSize bytes (1 MiB by default).
//
// Keepalive is matched with the server's policy (KeepaliveTime), so an
// hours-long quiet solve stream stays open. There is no default deadline:
// give ctx one if you want one, or use SolveRequest.TimeLimit for a budget
// the solver itself honours (running out is a status, not an error).
//
// Errors are gRPC status errors (use status.Code): INVALID_ARGUMENT,
// NOT_FOUND, FAILED_PRECONDITION, RESOURCE_EXHAUSTED, CANCELED,
// DEADLINE_EXCEEDED, UNAUTHENTICATED, UNAVAILABLE, INTERNAL, as the .proto
// documents. A Client is safe for concurrent use.
package client
