"""Tests of the residua Python client against a real `residua serve`.

The Go test TestPythonPackage (cmd/residua) builds the binary, starts it on
a loopback port and runs these with

    RESIDUA_ADDRESS      the server's gRPC address
    RESIDUA_SHARED       the shared folder (SuiteSparse matrices in matrices/)
    RESIDUA_SUMMARY_KEYS the JSON keys of the Go summary (solve.Summary), comma-separated

Without RESIDUA_ADDRESS the tests skip, saying so. The outside references are
SciPy (scipy.io.mmread reads the Matrix Market files, scipy.sparse.linalg
.spsolve solves the same systems directly) and NumPy's dense SVD for the
condition numbers that bound the forward error.
"""

from __future__ import annotations

import os
import tempfile
import threading
import time
import unittest

import numpy as np
import scipy.io
import scipy.sparse as sp
import scipy.sparse.linalg as sla

import residua

ADDRESS = os.environ.get("RESIDUA_ADDRESS", "")
SHARED = os.environ.get("RESIDUA_SHARED", "")


def shared_matrix(name: str) -> tuple[str, sp.csr_matrix]:
    path = os.path.join(SHARED, "matrices", name)
    if not os.path.exists(path):
        raise unittest.SkipTest("%s not found (set RESIDUA_SHARED)" % path)
    return path, sp.csr_matrix(scipy.io.mmread(path))


def laplacian(n: int) -> sp.csr_matrix:
    """The 5-point finite-difference Laplacian on an n×n grid (Dirichlet),
    SPD by construction (Saad, Iterative Methods, 2nd ed., §2.2)."""
    t = sp.diags([-1.0, 2.0, -1.0], [-1, 0, 1], shape=(n, n))
    i = sp.identity(n)
    return sp.csr_matrix(sp.kron(i, t) + sp.kron(t, i))


def forward_error_bound(a: sp.csr_matrix, rel_res: float) -> float:
    """‖x − x*‖/‖x*‖ ≤ κ₂(A)·‖b − A·x‖/‖b‖ (Golub & Van Loan, Matrix
    Computations 4th ed., §2.6.2; Higham, Accuracy and Stability 2nd ed.,
    §7.1), with κ₂ from NumPy's dense SVD; the direct solve's own error,
    about κ₂·u, is added, with a factor 10 for its growth (common
    practice)."""
    kappa = np.linalg.cond(a.toarray())
    return kappa * (rel_res + 10 * np.finfo(float).eps)


@unittest.skipUnless(ADDRESS, "RESIDUA_ADDRESS is not set: run through `go test -run TestPythonPackage ./cmd/residua`")
class ClientTest(unittest.TestCase):
    client: residua.Client

    @classmethod
    def setUpClass(cls) -> None:
        cls.client = residua.Client(ADDRESS)

    @classmethod
    def tearDownClass(cls) -> None:
        cls.client.close()

    def test_health(self) -> None:
        self.assertEqual(self.client.health(), "SERVING")

    def test_upload_ids_agree(self) -> None:
        # The same matrix as CSR_RAW from SciPy and as the Matrix Market
        # file must get the same id (the .proto: "the same matrix uploaded
        # twice, in either encoding, is stored once and keeps its id"), and
        # the id computed here must be the server's.
        path, a = shared_matrix("gr_30_30.mtx")
        m = self.client.upload(a, name="gr_30_30 from scipy")
        self.assertEqual(m.id, residua.matrix_id(a))
        # The collection's index (MANIFEST.tsv): 900×900, 7744 entries with
        # both triangles.
        self.assertEqual((m.rows, m.cols, m.nonzeros, m.symmetry), (900, 900, 7744, "symmetric"))
        f = self.client.upload(path)
        self.assertEqual(f.id, m.id)
        self.assertTrue(f.already_stored)
        # Any SciPy format, duplicates and unsorted columns included, is
        # the same matrix once summed.
        coo = a.tocoo()
        perm = np.random.default_rng(3).permutation(coo.nnz)
        half = coo.data[perm] / 2
        dup = sp.coo_matrix((np.concatenate([half, half]),
                             (np.concatenate([coo.row[perm]] * 2), np.concatenate([coo.col[perm]] * 2))),
                            shape=a.shape)
        self.assertEqual(residua.matrix_id(dup), m.id)
        self.assertEqual(self.client.ensure(dup), (self.client.matrix(m.id), False))

    def test_small_chunks(self) -> None:
        # 7-byte chunks split entries and span the three arrays: the server
        # reads their concatenation (the .proto's UploadMatrix contract).
        _, a = shared_matrix("bcsstk01.mtx")
        with residua.Client(ADDRESS, chunk_bytes=7) as c:
            m = c.upload(a, name="bcsstk01 in 7-byte chunks")
        self.assertEqual(m.id, residua.matrix_id(a))
        self.assertEqual(m.upload_bytes, residua.to_raw_csr(a).nbytes)

    def test_long_vectors_uploaded(self) -> None:
        # Three columns of 90,000 entries are 2.16 MB, over the 2 MiB a
        # request carries inline: the client uploads the rest first.
        a = laplacian(300)
        n = a.shape[0]
        rng = np.random.default_rng(4)
        bs = rng.standard_normal((n, 3))
        self.assertGreater(bs.nbytes, residua.client.INLINE_BYTES)
        sol = self.client.solve(a, bs, precond="ic0")
        for j in range(3):
            rel = np.linalg.norm(bs[:, j] - a @ sol.x[:, j]) / np.linalg.norm(bs[:, j])
            # The default stopping test, rtol 1e-8, rechecked here.
            self.assertLessEqual(rel, 1.01e-8, "column %d" % j)

    def test_solve_uploads_once(self) -> None:
        # A matrix no other test uses (diagonally dominant, so SPD by
        # Gershgorin's theorem: Golub & Van Loan §7.2.1): the first solve
        # uploads it, the second finds it by its id.
        r = sp.random(300, 300, density=0.01, random_state=11)
        off = r + r.T
        a = sp.csr_matrix(off + sp.diags(1.0 + np.asarray(abs(off).sum(axis=1)).ravel()))
        try:
            self.client.delete(residua.matrix_id(a))  # left by an earlier run on this server
        except residua.NotFoundError:
            pass
        first = self.client.solve(a, np.ones(300)).summary
        self.assertEqual(first.matrix_uploaded, True)
        self.assertIsNotNone(first.upload_seconds)
        second = self.client.solve(a, np.ones(300)).summary
        self.assertEqual((second.matrix_uploaded, second.upload_seconds), (False, None))
        self.assertEqual(second.matrix_id, first.matrix_id)
        self.assertIsNone(self.client.solve(first.matrix_id, np.ones(300)).summary.matrix_uploaded)

    def test_solve_against_spsolve(self) -> None:
        _, a = shared_matrix("gr_30_30.mtx")
        b = np.random.default_rng(1).standard_normal(a.shape[0])
        rtol = 1e-10
        sol = self.client.solve(a, b, precond="jacobi", rtol=rtol)
        s = sol.summary
        self.assertTrue(sol.converged)
        self.assertEqual((s.status, s.method, s.preconditioner, s.rhs_index), ("converged", "cg", "jacobi", 0))
        self.assertEqual(sol.x.shape, b.shape)
        rel = np.linalg.norm(b - a @ sol.x) / np.linalg.norm(b)
        # The server's stopping test on the true residual, rechecked here;
        # 1% covers the different order of summation.
        self.assertLessEqual(rel, 1.01 * rtol)
        self.assertAlmostEqual(s.relative_residual / rel, 1.0, delta=0.01)
        ref = sla.spsolve(sp.csc_matrix(a), b)
        err = np.linalg.norm(sol.x - ref) / np.linalg.norm(ref)
        self.assertLessEqual(err, forward_error_bound(a, rel))

    def test_multiple_right_hand_sides(self) -> None:
        _, a = shared_matrix("gr_30_30.mtx")
        n = a.shape[0]
        rng = np.random.default_rng(2)
        # Three load cases: random, A·1 (solution known: ones) and zero
        # (solution zero, converged at iteration 0).
        bs = np.column_stack([rng.standard_normal(n), a @ np.ones(n), np.zeros(n)])
        sol = self.client.solve(a, bs, precond="ic0", rtol=1e-10)
        self.assertEqual(sol.x.shape, (n, 3))
        self.assertEqual([s.rhs_index for s in sol.summaries], [0, 1, 2])
        self.assertEqual([s.rhs for s in sol.summaries], ["b[:, 0]", "b[:, 1]", "b[:, 2]"])
        self.assertEqual(len({s.job_id for s in sol.summaries}), 1)
        for j in range(2):
            rel = np.linalg.norm(bs[:, j] - a @ sol.x[:, j]) / np.linalg.norm(bs[:, j])
            self.assertLessEqual(rel, 1.01e-10, "column %d" % j)
            ref = sla.spsolve(sp.csc_matrix(a), bs[:, j])
            self.assertLessEqual(np.linalg.norm(sol.x[:, j] - ref) / np.linalg.norm(ref),
                                 forward_error_bound(a, rel), "column %d" % j)
        self.assertTrue(np.all(sol.x[:, 2] == 0))
        self.assertEqual(sol.summaries[2].iterations, 0)
        # One starting guess for every column: x0 = 1 solves column 1 at once.
        sol = self.client.solve(a, bs[:, :2], x0=np.ones(n), rtol=1e-10)
        self.assertEqual(sol.summaries[1].iterations, 0)

    def test_progress_monotone(self) -> None:
        _, a = shared_matrix("gr_30_30.mtx")
        n = a.shape[0]
        bs = np.column_stack([np.ones(n), np.arange(n, dtype=float)])
        seen: list[residua.Progress] = []
        sol = self.client.solve(a, bs, precond="none", rtol=1e-10, progress=seen.append, progress_every=1)
        for j, s in enumerate(sol.summaries):
            its = [p.iteration for p in seen if p.rhs == j]
            # The Solve contract: the first event at iteration 0, at most
            # one per iteration, the last at the final iteration.
            self.assertEqual(its[0], 0)
            self.assertTrue(all(x < y for x, y in zip(its, its[1:])), its)
            self.assertEqual(its[-1], s.iterations)
            # From x0 = 0 the first residual is b itself.
            self.assertEqual(seen[[p.rhs for p in seen].index(j)].relative_residual, 1.0)
        # The server solves a system's right-hand sides as one block, so
        # their events interleave; each column's own order is checked above.
        self.assertEqual(sorted({p.rhs for p in seen}), [0, 1])
        self.assertTrue(all(p.job_id == sol.job_id for p in seen))

    def test_cancel_from_progress(self) -> None:
        # 160,000 unknowns without a preconditioner at rtol 1e-14 need
        # hundreds of iterations (CG's bound grows with √κ, κ ≈ 0.4·n² for
        # this grid: Saad §6.11.3), so the job is still running when the
        # cancel arrives.
        a = laplacian(400)
        b = np.ones(a.shape[0])
        state = {}

        def on_progress(p: residua.Progress) -> None:
            if p.iteration >= 5 and "job" not in state:
                state["job"] = self.client.cancel(p.job_id)

        with self.assertRaises(residua.SolveError) as cm:
            self.client.solve(a, b, precond="none", rtol=1e-14, progress=on_progress, progress_every=1)
        e = cm.exception
        self.assertEqual(e.outcome, "cancelled")
        self.assertEqual(e.code, "CANCELLED")
        self.assertEqual(e.summaries[0].status, "cancelled")
        self.assertLess(e.summaries[0].iterations, 1000)
        self.assertEqual(self.client.job(e.job_id).outcome, "cancelled")

    def test_callback_error_cancels(self) -> None:
        a = laplacian(400)

        class Stop(Exception):
            pass

        job = []

        def on_progress(p: residua.Progress) -> None:
            job.append(p.job_id)
            if p.iteration >= 3:
                raise Stop()

        with self.assertRaises(Stop):
            self.client.solve(a, np.ones(a.shape[0]), precond="none", rtol=1e-14, progress=on_progress,
                              progress_every=1)
        # The stream ended, so the attached job is cancelled (the .proto:
        # "the solver stops within one iteration").
        deadline = time.time() + 20
        while self.client.job(job[0]).state != "done" and time.time() < deadline:
            time.sleep(0.05)
        self.assertEqual(self.client.job(job[0]).outcome, "cancelled")

    def test_detached_cancel_and_watch(self) -> None:
        a = laplacian(400)
        n = a.shape[0]
        job_id = self.client.submit(a, np.ones((n, 2)), precond="none", rtol=1e-14, label="python detached")
        watched: list[residua.Progress] = []
        result: dict[str, BaseException] = {}

        def follow() -> None:
            try:
                self.client.watch(job_id, watched.append)
            except residua.ResiduaError as err:
                result["err"] = err

        t = threading.Thread(target=follow)
        t.start()
        deadline = time.time() + 20
        while not watched and time.time() < deadline:
            time.sleep(0.01)
        job = self.client.cancel(job_id)
        self.assertEqual(job.id, job_id)
        t.join(30)
        self.assertFalse(t.is_alive())
        self.assertIsInstance(result.get("err"), residua.SolveError)
        self.assertEqual(result["err"].outcome, "cancelled")
        # Both columns ran as one block and were cancelled together: each
        # kept its last iterate.
        x = result["err"].x
        self.assertEqual(x.shape, (n, 2))
        self.assertTrue(np.isfinite(x).all())
        listed = {j.id: j for j in self.client.jobs()}
        self.assertEqual((listed[job_id].state, listed[job_id].outcome, listed[job_id].detached),
                         ("done", "cancelled", True))
        self.assertEqual(listed[job_id].label, "python detached")

    def test_detached_solve_downloads(self) -> None:
        _, a = shared_matrix("gr_30_30.mtx")
        n = a.shape[0]
        bs = np.column_stack([np.ones(n), np.linspace(-1, 1, n)])
        job_id = self.client.submit(a, bs, rtol=1e-10)
        sol = self.client.watch(job_id)
        self.assertEqual(sol.x.shape, (n, 2))
        for j in range(2):
            rel = np.linalg.norm(bs[:, j] - a @ sol.x[:, j]) / np.linalg.norm(bs[:, j])
            self.assertLessEqual(rel, 1.01e-10)
            np.testing.assert_array_equal(self.client.download(job_id, j), sol.x[:, j])
        hist = self.client.history(job_id, 1)
        self.assertEqual(hist[0].iteration, 0)
        self.assertEqual(hist[-1].iteration, sol.summaries[1].iterations)

    def test_malformed_matrix_market(self) -> None:
        # The Matrix Market definition (Boisvert, Pozo, Remington, NIST
        # 1996): row indices run from 1 to M; line 5 holds row 4 of 3.
        with tempfile.TemporaryDirectory() as d:
            path = os.path.join(d, "bad.mtx")
            with open(path, "w") as f:
                f.write("%%MatrixMarket matrix coordinate real general\n% a made-up 3×3\n3 3 3\n"
                        "1 1 4.0\n4 2 1.0\n3 3 4.0\n")
            with self.assertRaises(residua.InputError) as cm:
                self.client.upload(path)
        e = cm.exception
        self.assertEqual((e.line, e.column, e.source), (5, 1, "bad.mtx"))
        self.assertEqual((e.outcome, e.code), ("refused", "INVALID_ARGUMENT"))
        self.assertIn("bad.mtx:5", str(e))

    def test_malformed_csr(self) -> None:
        # A NaN in the values: the CSR_RAW layout (the .proto) puts value i
        # at byte 8·(rows+1) + 4·nnz + 8·i.
        a = sp.csr_matrix(np.array([[4.0, 1.0, 0.0], [1.0, 4.0, 0.0], [0.0, 0.0, np.nan]]))
        with self.assertRaises(residua.InputError) as cm:
            self.client.upload(a)
        e = cm.exception
        self.assertEqual((e.array, e.offset), ("values", 8 * 4 + 4 * 5 + 8 * 4))

    def test_refusals(self) -> None:
        _, a = shared_matrix("gr_30_30.mtx")
        n = a.shape[0]
        with self.assertRaises(residua.NotFoundError) as cm:
            self.client.solve("0" * 64, np.ones(n))
        self.assertEqual(cm.exception.outcome, "refused")
        with self.assertRaises(ValueError):
            self.client.solve(a, np.ones(n + 1))
        with self.assertRaises(ValueError):
            self.client.solve(a, np.full(n, np.nan))
        with self.assertRaises(residua.InputError):
            self.client.solve(a, np.ones(n), precond="no-such-kind")
        # Conjugate gradients needs a symmetric matrix: refused before any
        # work.
        u = sp.csr_matrix(np.triu(np.ones((4, 4))) + 3 * np.eye(4))
        with self.assertRaises(residua.RequestError) as cm:
            self.client.solve(u, np.ones(4), method="cg")
        self.assertEqual((cm.exception.outcome, cm.exception.code), ("refused", "FAILED_PRECONDITION"))

    def test_not_converged(self) -> None:
        _, a = shared_matrix("gr_30_30.mtx")
        b = np.ones(a.shape[0])
        with self.assertRaises(residua.SolveError) as cm:
            self.client.solve(a, b, precond="none", max_iter=3)
        self.assertEqual(cm.exception.outcome, "iteration-limit")
        self.assertEqual(cm.exception.summaries[0].iterations, 3)
        self.assertEqual(cm.exception.x.shape, b.shape)
        sol = self.client.solve(a, b, precond="none", max_iter=3, check=False)
        self.assertEqual((sol.outcome, sol.summary.status, sol.summary.converged), ("iteration-limit",) * 2 + (False,))

    def test_time_limit(self) -> None:
        # Hundreds of unpreconditioned iterations (see test_cancel_from_progress)
        # cannot fit 50 ms: the outcome is time-limit, not an error of the call.
        a = laplacian(400)
        with self.assertRaises(residua.SolveError) as cm:
            self.client.solve(a, np.ones(a.shape[0]), precond="none", rtol=1e-14, time_limit=0.05)
        s = cm.exception.summaries[0]
        self.assertEqual((cm.exception.outcome, cm.exception.code, s.status), ("time-limit", "", "time-limit"))
        self.assertEqual(s.time_limit_seconds, 0.05)

    def test_breakdown_and_setup_failed(self) -> None:
        # diag(1, −1) is symmetric but indefinite: with b = (1, 1) the first
        # direction has pᵀAp = 0, a breakdown of CG (Saad §6.7: CG needs
        # pᵀAp > 0). A zero diagonal entry leaves Jacobi undefined: the
        # set-up fails before any iteration. (The automatic method would
        # hand the indefinite matrix to MINRES: conjugate gradients are
        # asked for by name.)
        with self.assertRaises(residua.SolveError) as cm:
            self.client.solve(sp.diags([1.0, -1.0]).tocsr(), np.ones(2), method="cg", precond="none")
        self.assertEqual((cm.exception.outcome, cm.exception.code), ("breakdown", "FAILED_PRECONDITION"))
        self.assertEqual(cm.exception.summaries[0].status, "breakdown")
        self.assertTrue(cm.exception.summaries[0].advice, "a breakdown comes with advice (solve.Advice)")
        zero = sp.csr_matrix(np.array([[0.0, 1.0], [1.0, 2.0]]))
        with self.assertRaises(residua.SolveError) as cm:
            self.client.solve(zero, np.ones(2), method="cg", precond="jacobi")
        self.assertEqual(cm.exception.outcome, "setup-failed")
        self.assertEqual(cm.exception.summaries[0].iterations, 0)

    def test_tls_and_token(self) -> None:
        address, ca, token = (os.environ.get(k, "") for k in ("RESIDUA_TLS_ADDRESS", "RESIDUA_TLS_CA", "RESIDUA_TOKEN"))
        if not address:
            self.skipTest("RESIDUA_TLS_ADDRESS is not set")
        with residua.Client(address, tls=ca) as c:
            # The standard health check needs no token (the .proto).
            self.assertEqual(c.health(), "SERVING")
            with self.assertRaises(residua.AuthError) as cm:
                c.matrices()
            self.assertEqual((cm.exception.outcome, cm.exception.code), ("failed", "UNAUTHENTICATED"))
        with residua.Client(address, token=token, tls=ca) as c:
            _, a = shared_matrix("bcsstk01.mtx")
            self.assertTrue(c.solve(a, np.ones(a.shape[0])).converged)
        # Plain text to a TLS server: no connection.
        with residua.Client(address, token=token) as c:
            with self.assertRaises(residua.UnavailableError):
                c.matrices()

    def test_least_squares(self) -> None:
        # well1033: 1033×320, full column rank (MANIFEST.tsv).
        _, a = shared_matrix("well1033.mtx")
        rng = np.random.default_rng(5)
        b = a @ np.ones(a.shape[1]) + 0.1 * rng.standard_normal(a.shape[0])
        sol = self.client.solve(a, b, method="lsqr")
        s = sol.summary
        self.assertEqual((s.method, sol.x.shape), ("lsqr", (a.shape[1],)))
        r = b - a @ sol.x
        g = a.T @ r
        # Paige and Saunders' rule for an inconsistent system (ACM TOMS
        # 8(1), 1982, §6): ‖Aᵀr‖ ≤ atol·‖A‖·‖r‖, atol 1e-8; ‖A‖_F bounds
        # their ‖A‖ estimate from above, a factor 10 covers the summation
        # order.
        self.assertLessEqual(np.linalg.norm(g) / (sla.norm(a) * np.linalg.norm(r)), 1e-7)
        ref, *_ = np.linalg.lstsq(a.toarray(), b, rcond=None)
        # Perturbation of least squares (Higham §20.1): a relative change
        # η in the normal equations moves x by about (κ + κ²·tan θ)·η;
        # η = 1e-7 from the check above.
        kappa = np.linalg.cond(a.toarray())
        tan = np.linalg.norm(b - a @ ref) / np.linalg.norm(a @ ref)
        self.assertLessEqual(np.linalg.norm(sol.x - ref) / np.linalg.norm(ref), (kappa + kappa**2 * tan) * 1e-7)
        self.assertIsNotNone(s.normal_residual_norm)
        self.assertIsNone(s.lambda_min_estimate)

    def test_summary_keys(self) -> None:
        keys = os.environ.get("RESIDUA_SUMMARY_KEYS", "")
        if not keys:
            self.skipTest("RESIDUA_SUMMARY_KEYS is not set")
        documented = set(keys.split(","))
        _, a = shared_matrix("gr_30_30.mtx")
        sol = self.client.solve(a, np.ones(a.shape[0]))
        fields = set(sol.summary.__dataclass_fields__)
        self.assertEqual(fields - documented, set(), "Summary fields that are not keys of the Go summary")
        d = sol.summary.to_dict()
        self.assertLessEqual(set(d), documented)
        for k in ("converged", "status", "headline", "relative_residual", "rtol", "matrix_id", "job_id",
                  "cond_estimate", "forward_error_estimate"):
            self.assertIn(k, d)
        self.assertNotIn("normal_residual_norm", d)  # a least-squares figure


if __name__ == "__main__":
    unittest.main()
