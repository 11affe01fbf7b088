// Package matrixio reads and writes sparse matrices and vectors in the Matrix
// Market exchange format (R. F. Boisvert, R. Pozo, K. Remington, "The Matrix
// Market Exchange Formats: Initial Design", NIST, 1996).
//
// # Reading
//
// ReadMatrix and ReadVector parse a plain Matrix Market stream;
// ReadMatrixFile, ReadVectorFile and ReadBundleRHS open files, undo gzip
// compression and find the members of the collection's bundles
// (NAME.tar.gz holding NAME/NAME.mtx and NAME/NAME_b.mtx) without unpacking
// them to disk. Compression and archives are the loader's business; the
// parser only ever sees text.
//
// Everything the format defines for real data is accepted: objects matrix
// and vector, formats coordinate and array (column-major; one triangle by
// columns for symmetric and skew-symmetric arrays), fields real, double,
// integer (any int64, rounded to the nearest float64 beyond 2^53) and
// pattern (every value 1), symmetries general, symmetric and
// skew-symmetric. Complex data and the hermitian symmetry are refused with
// ErrComplex: residua solves real systems.
//
// The reader is lenient where the format allows it (keywords in any case,
// blanks around fields, blank lines, CRLF line ends, comment lines anywhere
// before the size line) and strict on the data: indices are 1-based and in
// range, the number of entries equals the size line's (a file that ends
// early is io.ErrUnexpectedEOF), values are finite numbers, and a symmetric
// file must store one triangle only (entries on both sides of the diagonal
// are an error, not silently doubled). Duplicate entries are summed, the
// finite-element assembly convention, and counted in Info.Duplicates.
//
// A result is in CSR form (package sparse) with full storage: symmetric and
// skew-symmetric files are expanded to both triangles, the diagonal stored
// once. Explicit zeros are kept unless Options.DropZeros is set.
//
// # Limits, memory and speed
//
// Options.Limits bounds rows, columns, stored entries and bytes of text. The
// sizes are checked against the size line before anything is allocated, and
// storage then grows only with the entries actually read, so a short file
// that claims a huge matrix costs nothing, except for its rows: the row
// pointers take 8 bytes a row however few the entries. Limits.
// RefuseMostlyEmpty refuses, at the size line, a matrix under which more
// than half of the rows or columns must be empty (MostlyEmpty;
// ErrMostlyEmpty), and Options.Admit lets a caller charge the declared
// cost against a budget of its own before the read allocates for it.
//
// The text is never held whole. The data section is cut into chunks of whole
// lines (64 KiB growing to 1 MiB) that GOMAXPROCS goroutines parse at once;
// the calling goroutine takes the parsed chunks in file order, so an error
// carries the exact line of the first defect in the file, and hands their
// entries to a sparse.Assembler, which checks them and counts them per row
// while later chunks are parsed. A handful of chunks are in flight at a time,
// and their buffers are reused. The entries wait as triplets (16 bytes each)
// until the end of the input, in slabs of up to 4 Mi entries that grow with
// the entries read (never beyond what the size line still announces) and
// that, on Linux, are offered huge pages (madvise MADV_HUGEPAGE): first
// touches of fresh memory, 4 KiB page faults, cost more than the parsing on
// a virtual machine. Then sparse.Assembler.Build places the entries; its
// note on memory says why the peak stays below about 1.5 times the size of
// the resulting CSR for a symmetric file. Every goroutine has ended when a
// read function returns, error or not.
//
// # Writing
//
// WriteMatrix writes coordinate real files, general or (for exactly symmetric
// matrices) the lower triangle only; WriteVector writes array files. Values
// are written in the shortest form that reads back to the same float64, so a
// write→read round trip is exact. WriteMatrixFile and WriteVectorFile write
// through a temporary file in the target's folder and rename it into place
// after an fsync, so an interrupted run never leaves a half-written file.
//
// # Errors
//
// Defects of the input are returned as *ParseError, which carries the file
// name, the line, the column and a reason that wraps one of the Err...
// values (test with errors.Is); its message says what was expected and what
// was found. Programmer mistakes, such as writing a nil matrix, panic with a
// message that starts with "matrixio:".
//
// No function keeps a reference to its arguments; results are newly
// allocated and owned by the caller.
package matrixio
