// Package wire holds what the residua server (package api) and its Go
// client (package client) must agree on byte for byte, each written once:
//
//   - vectors packed as little-endian IEEE 754 binary64 (Pack, Unpack,
//     Chunker), with the SHA-256 the solution stream's last chunk carries
//     (VectorSum);
//   - the CSR_RAW matrix encoding, written (EncodeCSR) and read
//     (DecodeCSR, whose errors give the byte offset and the row;
//     DecodeCSRCharged, which grows the arrays as their bytes arrive and
//     charges each allocation first, by the rule of Grow), and the content
//     hash that is a matrix's id (MatrixID);
//   - the conversions between residua's own types and the protobuf
//     messages: solve.Summary ↔ SolveResult, krylov.Progress ↔ Progress,
//     solve.Request ↔ SolveRequest, and the job states' words.
//
// The layouts are those documented in proto/residua/v1/residua.proto.
// Conversions are total in both directions for the figures the server
// knows: Result(Summary(r)) == r and Summary(Result(s)) == s on those
// fields (the test checks every field by reflection, so a field added to
// one side and forgotten in the conversion fails it).
package wire
