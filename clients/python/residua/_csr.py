"""The CSR_RAW encoding of a matrix and its content hash.

The encoding is the one proto/residua/v1/residua.proto documents under
MatrixEncoding.CSR_RAW: row pointers as rows+1 little-endian int64 values,
then the column indices as nonzeros int32 values (0-based, strictly
increasing within each row), then the values as nonzeros float64 values,
with no header and no padding. The server's decoder is wire.DecodeCSR in the
Go tree; the content hash is wire.MatrixID.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass
from typing import Any, Iterator

import numpy as np

# The largest index an int32 column index holds, and so the largest number
# of columns the encoding can describe (sparse.MaxDim on the server).
_MAX_DIM = 2**31 - 1

# The version tag that opens the content hash (wire.MatrixID).
_ID_TAG = b"residua csr v1\n"


@dataclass(frozen=True)
class RawCSR:
    """A matrix as the three little-endian arrays of the CSR_RAW encoding."""

    rows: int
    cols: int
    indptr: np.ndarray  # int64, rows+1 entries
    indices: np.ndarray  # int32, nonzeros entries
    data: np.ndarray  # float64, nonzeros entries

    @property
    def nonzeros(self) -> int:
        """The number of stored entries."""
        return int(self.data.shape[0])

    @property
    def nbytes(self) -> int:
        """The size of the encoding: 8·(rows+1) + 12·nonzeros bytes."""
        return 8 * (self.rows + 1) + 12 * self.nonzeros

    def arrays(self) -> tuple[memoryview, memoryview, memoryview]:
        """The three arrays' bytes, in the order they travel."""
        return (self.indptr.data.cast("B"), self.indices.data.cast("B"), self.data.data.cast("B"))

    def chunks(self, size: int) -> Iterator[bytes]:
        """Yields the encoding in pieces of exactly size bytes (the last may
        be shorter). A chunk may end inside an array entry or span two
        arrays: the server reads the concatenation."""
        if size < 1:
            raise ValueError("residua: chunk size must be positive")
        pending = bytearray()
        for view in self.arrays():
            pos = 0
            if pending:
                take = min(size - len(pending), len(view))
                pending += view[:take]
                pos = take
                if len(pending) < size:
                    continue
                yield bytes(pending)
                pending = bytearray()
            while len(view) - pos >= size:
                yield bytes(view[pos:pos + size])
                pos += size
            pending += view[pos:]
        if pending:
            yield bytes(pending)

    def sha256(self) -> str:
        """The lowercase hex SHA-256 of the encoding as sent (the upload's
        expected_sha256)."""
        h = hashlib.sha256()
        for view in self.arrays():
            h.update(view)
        return h.hexdigest()

    def matrix_id(self) -> str:
        """The id the server gives this matrix: SHA-256 over a version tag,
        the dimensions as two int64 values and the three arrays, all
        little-endian (wire.MatrixID), so a client can ask whether the
        server holds a matrix before sending it."""
        h = hashlib.sha256(_ID_TAG)
        h.update(np.array([self.rows, self.cols], dtype="<i8").tobytes())
        for view in self.arrays():
            h.update(view)
        return h.hexdigest()


def to_raw_csr(matrix: Any) -> RawCSR:
    """Converts a scipy.sparse matrix or array of any format to the CSR_RAW
    arrays: a copy in CSR form with duplicate entries summed and the column
    indices of each row sorted (the encoding requires strictly increasing
    columns), values as float64. The caller's matrix is not changed.

    Raises TypeError for something that is not a SciPy sparse matrix, or a
    complex one, and ValueError for a matrix too large for the encoding.
    """
    import scipy.sparse as sp

    if not sp.issparse(matrix):
        raise TypeError("residua: upload takes a scipy.sparse matrix or a Matrix Market file path, not %s"
                        % type(matrix).__name__)
    if np.issubdtype(matrix.dtype, np.complexfloating):
        raise TypeError("residua: the matrix is complex; residua solves real systems")
    rows, cols = (int(d) for d in matrix.shape)
    if rows > _MAX_DIM or cols > _MAX_DIM:
        raise ValueError("residua: a %d×%d matrix exceeds the encoding's %d rows and columns" % (rows, cols, _MAX_DIM))
    a = sp.csr_matrix(matrix, dtype=np.float64, copy=True)
    # Sums duplicates and sorts each row's columns, in place on the copy.
    a.sum_duplicates()
    return RawCSR(
        rows=rows,
        cols=cols,
        indptr=np.ascontiguousarray(a.indptr, dtype="<i8"),
        indices=np.ascontiguousarray(a.indices, dtype="<i4"),
        data=np.ascontiguousarray(a.data, dtype="<f8"),
    )


def matrix_id(matrix: Any) -> str:
    """The id the server gives matrix (see RawCSR.matrix_id)."""
    return to_raw_csr(matrix).matrix_id()
