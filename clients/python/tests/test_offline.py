"""Tests of the client's pieces that need no server: the CSR_RAW arrays and
their chunks, the parsing of the server's error messages, the JSON form of
a summary. They run with the server tests (TestPythonPackage) and alone
(python3 -m unittest discover -s tests)."""

from __future__ import annotations

import json
import math
import unittest

import numpy as np
import scipy.sparse as sp

import residua
from residua.v1 import residua_pb2 as pb


class RawCSRTest(unittest.TestCase):
    def test_canonical_arrays(self) -> None:
        # Entries given out of order with a duplicate: CSR_RAW needs each
        # row's columns strictly increasing (the .proto), so they are sorted
        # and the duplicate summed; the caller's matrix is left alone.
        coo = sp.coo_matrix(([3.0, 1.0, 2.0, 5.0], ([1, 0, 1, 1], [2, 1, 0, 2])), shape=(2, 3))
        raw = residua.to_raw_csr(coo)
        np.testing.assert_array_equal(raw.indptr, [0, 1, 3])
        np.testing.assert_array_equal(raw.indices, [1, 0, 2])
        np.testing.assert_array_equal(raw.data, [1.0, 2.0, 8.0])
        self.assertEqual((raw.indptr.dtype.str, raw.indices.dtype.str, raw.data.dtype.str), ("<i8", "<i4", "<f8"))
        self.assertEqual(coo.nnz, 4)
        # 8·(rows+1) + 12·nonzeros bytes (the .proto's CSR_RAW).
        self.assertEqual(raw.nbytes, 8 * 3 + 12 * 3)
        self.assertEqual(len(b"".join(raw.chunks(5))), raw.nbytes)

    def test_chunks_are_the_concatenation(self) -> None:
        a = sp.random(40, 30, density=0.2, random_state=2, format="csc")
        raw = residua.to_raw_csr(a)
        whole = b"".join(bytes(v) for v in raw.arrays())
        for size in (1, 3, 8, 13, 4096, 1 << 20):
            chunks = list(raw.chunks(size))
            self.assertEqual(b"".join(chunks), whole, size)
            self.assertTrue(all(len(c) == size for c in chunks[:-1]), size)

    def test_refusals(self) -> None:
        with self.assertRaises(TypeError):
            residua.to_raw_csr(np.eye(3))
        with self.assertRaises(TypeError):
            residua.to_raw_csr(sp.identity(3, dtype=complex))

    def test_id_depends_on_shape(self) -> None:
        # The id hashes the dimensions too: an empty 2×2 and 3×3 differ.
        self.assertNotEqual(residua.matrix_id(sp.csr_matrix((2, 2))), residua.matrix_id(sp.csr_matrix((3, 3))))


class ErrorTest(unittest.TestCase):
    def test_matrix_market_position(self) -> None:
        # matrixio.ParseError's form: NAME:LINE:COLUMN: reason.
        e = residua.InputError("plate.mtx:12:3: invalid value \"x\"")
        self.assertEqual((e.source, e.line, e.column, e.offset), ("plate.mtx", 12, 3, None))
        e = residua.InputError("plate.mtx:7: the file ends before its 9 entries")
        self.assertEqual((e.line, e.column), (7, None))

    def test_raw_position(self) -> None:
        # wire.RawError's form: byte OFFSET (ARRAY entry I, row R): reason.
        e = residua.InputError("invalid request: m: CSR_RAW byte 52 (column indices entry 3, row 2): column ...")
        self.assertEqual((e.offset, e.array, e.row, e.line), (52, "column indices", 2, None))

    def test_outcome_words(self) -> None:
        for err, outcome in ((residua.InputError("x"), "refused"), (residua.NotFoundError("x"), "refused"),
                             (residua.LimitError("x"), "refused"), (residua.AuthError("x"), "failed"),
                             (residua.SolveError("x", outcome="stagnated"), "stagnated")):
            self.assertEqual(err.outcome, outcome)
            self.assertIsInstance(err, residua.ResiduaError)


class SummaryTest(unittest.TestCase):
    def test_json_form(self) -> None:
        r = pb.SolveResult(rhs=1, converged=False, status="breakdown", method="cg", relative_residual=math.nan,
                           rhs_norm=math.inf, preconditioner="none", settings=pb.Settings(rtol=1e-8, max_iter=40))
        d = json.loads(residua.Summary.from_pb(r, rhs="b[:, 1]").to_json())
        # The README's convention: NaN and ±Inf as strings; absent figures
        # left out (here the least-squares ones and the shift).
        self.assertEqual((d["relative_residual"], d["rhs_norm"]), ("NaN", "+Inf"))
        self.assertEqual((d["rtol"], d["max_iter"], d["rhs_index"], d["rhs"]), (1e-8, 40, 1, "b[:, 1]"))
        for k in ("btol", "damp", "normal_residual_norm", "shift", "error"):
            self.assertNotIn(k, d)


if __name__ == "__main__":
    unittest.main()
