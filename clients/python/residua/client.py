"""The residua client: a connection to a residua server (`residua serve`)
and the calls a simulation code makes on it.

The calls follow the service's contract in proto/residua/v1/residua.proto:
matrices go up once, in the CSR_RAW encoding for a SciPy matrix or as
Matrix Market text for a file, in chunks of chunk_bytes with the SHA-256
of what was sent; right-hand sides small enough travel inside the solve
request and longer ones are uploaded first; solutions come back in chunks
whose order, length and SHA-256 are checked before x is returned.
"""

from __future__ import annotations

import dataclasses
import datetime
import hashlib
import os
import time
from typing import Any, Callable, Iterator, NamedTuple, Optional, Union

import grpc
import numpy as np
from google.protobuf import duration_pb2

from . import errors
from ._csr import RawCSR, to_raw_csr
from ._types import Job, Matrix, Progress, Solution, Summary
from .v1 import residua_pb2 as pb
from .v1 import residua_pb2_grpc as pbg

# Upload messages carry 1 MiB of payload by default; the service takes at
# most 4,000,000 bytes a message (the .proto's Conventions).
DEFAULT_CHUNK_BYTES = 1 << 20
MAX_CHUNK_BYTES = 4_000_000

# Bytes of vectors a solve request carries inline (the Go client's budget):
# longer right-hand sides and guesses are uploaded first, so the request
# stays well under gRPC's 4 MiB message limit.
INLINE_BYTES = 2 << 20

# Keepalive matched with the server's enforcement policy (pings no more
# often than every 15 s are permitted; api/server.go): ping an idle
# connection every 30 s, give up after 20 s without an answer, so an
# hours-long quiet solve stream stays open and a dead server is noticed.
_CHANNEL_OPTIONS = [
    ("grpc.keepalive_time_ms", 30_000),
    ("grpc.keepalive_timeout_ms", 20_000),
    ("grpc.keepalive_permit_without_calls", 1),
    ("grpc.http2.max_pings_without_data", 0),
]

MatrixLike = Union[str, "os.PathLike[str]", Matrix, Any]
ProgressCallback = Callable[[Progress], Any]

_LEAST_SQUARES_METHODS = ("lsqr", "cgls")


class Client:
    """A connection to a residua server.

    address is "host:port". token, if given, is sent as a bearer token with
    every call (`residua serve --token-file`). tls is False (plain
    connection), True (TLS trusting the system's authorities), the path of
    a PEM file of the certificates to trust (a self-signed server), or
    grpc.ChannelCredentials. A Client may be shared by threads; close it
    (or use it in a with statement) when done.
    """

    def __init__(self, address: str, token: Optional[str] = None,
                 tls: Union[bool, str, "os.PathLike[str]", grpc.ChannelCredentials] = False, *,
                 chunk_bytes: int = DEFAULT_CHUNK_BYTES) -> None:
        if not 1 <= chunk_bytes <= MAX_CHUNK_BYTES:
            raise ValueError("residua: chunk_bytes %d is outside [1, %d]" % (chunk_bytes, MAX_CHUNK_BYTES))
        self.address = address
        self.chunk_bytes = chunk_bytes
        if tls is False or tls is None:
            self._channel = grpc.insecure_channel(address, options=_CHANNEL_OPTIONS)
        else:
            if tls is True:
                creds = grpc.ssl_channel_credentials()
            elif isinstance(tls, grpc.ChannelCredentials):
                creds = tls
            else:
                with open(tls, "rb") as f:
                    creds = grpc.ssl_channel_credentials(root_certificates=f.read())
            self._channel = grpc.secure_channel(address, creds, options=_CHANNEL_OPTIONS)
        # The token travels as call metadata, which works over plain and
        # TLS connections alike (the server checks "authorization").
        self._metadata = (("authorization", "Bearer " + token),) if token else ()
        self._stub = pbg.SolverStub(self._channel)

    # --- the connection ---------------------------------------------------

    def close(self) -> None:
        """Closes the connection."""
        self._channel.close()

    def __enter__(self) -> "Client":
        return self

    def __exit__(self, *exc: Any) -> None:
        self.close()

    def health(self, timeout: float = 10.0) -> str:
        """The server's standard gRPC health status: "SERVING",
        "NOT_SERVING" (shutting down) or "UNKNOWN"."""
        # grpc.health.v1.Health/Check with an empty request; the reply's
        # field 1 (status) is a varint, SERVING = 1, NOT_SERVING = 2.
        # Encoded here because Debian ships no health stubs for Python.
        check = self._channel.unary_unary("/grpc.health.v1.Health/Check",
                                          request_serializer=lambda m: m, response_deserializer=lambda b: b)
        reply = self._call(check, b"", timeout=timeout)
        status = reply[1] if len(reply) >= 2 and reply[0] == 0x08 else 0
        return {1: "SERVING", 2: "NOT_SERVING"}.get(status, "UNKNOWN")

    def _call(self, method: Callable[..., Any], request: Any, **kw: Any) -> Any:
        """A unary call with the token, its failure as the client's
        exception."""
        try:
            return method(request, metadata=self._metadata, **kw)
        except grpc.RpcError as e:
            raise errors.from_rpc(e) from None

    # --- matrices ---------------------------------------------------------

    def upload(self, matrix: Any, name: Optional[str] = None) -> Matrix:
        """Stores a matrix on the server and describes it.

        matrix is a scipy.sparse matrix or array of any format (sent as
        CSR_RAW: converted to CSR with duplicates summed, no text on either
        side), or the path of a Matrix Market file (sent as it is;
        gzip-compressed when its name ends in .gz). name is for people
        (default: the file's name, or "scipy"). The same matrix uploaded
        twice is stored once (Matrix.already_stored).

        Raises InputError for a malformed file (its line and column) or
        encoding (its byte offset and row), LimitError when the matrix is
        over the server's limits.
        """
        if isinstance(matrix, (str, os.PathLike)):
            return self._upload_file(os.fspath(matrix), name)
        return self._upload_raw(to_raw_csr(matrix), name or "scipy")

    def ensure(self, matrix: Any, name: Optional[str] = None) -> tuple[Matrix, bool]:
        """Makes sure the server holds a SciPy matrix: computes its id (the
        content hash) here and uploads it only when the server does not
        hold it. Returns the stored matrix and whether it was uploaded."""
        raw = to_raw_csr(matrix)
        try:
            return self.matrix(raw.matrix_id()), False
        except errors.NotFoundError:
            return self._upload_raw(raw, name or "scipy"), True

    def matrix(self, matrix_id: str) -> Matrix:
        """Describes a stored matrix; NotFoundError when the server does
        not hold it."""
        return Matrix.from_pb(self._call(self._stub.GetMatrix, pb.GetMatrixRequest(id=matrix_id)))

    def matrices(self) -> list[Matrix]:
        """The stored matrices, most recently used first."""
        return [Matrix.from_pb(m) for m in self._call(self._stub.ListMatrices, pb.ListMatricesRequest()).matrices]

    def delete(self, matrix_id: str) -> int:
        """Removes a stored matrix and its cached preconditioners; returns
        the bytes freed. RequestError while a job uses it."""
        return self._call(self._stub.DeleteMatrix, pb.DeleteMatrixRequest(id=matrix_id)).freed_bytes

    def _upload_raw(self, raw: RawCSR, name: str) -> Matrix:
        meta = pb.UploadMetadata(name=name, encoding=pb.CSR_RAW, rows=raw.rows, cols=raw.cols,
                                 nonzeros=raw.nonzeros, total_bytes=raw.nbytes, expected_sha256=raw.sha256())
        return self._upload(meta, raw.chunks(self.chunk_bytes))

    def _upload_file(self, path: str, name: Optional[str]) -> Matrix:
        # One pass for the checksum first, so that the server can refuse a
        # file altered on its way before storing anything.
        h = hashlib.sha256()
        with open(path, "rb") as f:
            for block in iter(lambda: f.read(self.chunk_bytes), b""):
                h.update(block)
        size = os.path.getsize(path)

        def chunks() -> Iterator[bytes]:
            with open(path, "rb") as f:
                yield from iter(lambda: f.read(self.chunk_bytes), b"")

        meta = pb.UploadMetadata(name=name or os.path.basename(path), encoding=pb.MATRIX_MARKET,
                                 gzip=path.endswith(".gz"), total_bytes=size, expected_sha256=h.hexdigest())
        return self._upload(meta, chunks())

    def _upload(self, meta: pb.UploadMetadata, chunks: Iterator[bytes]) -> Matrix:
        def requests() -> Iterator[pb.UploadMatrixRequest]:
            yield pb.UploadMatrixRequest(metadata=meta)
            for c in chunks:
                yield pb.UploadMatrixRequest(chunk=c)

        return Matrix.from_pb(self._call(self._stub.UploadMatrix, requests()))

    def _upload_vector(self, x: np.ndarray, name: str) -> str:
        data = np.ascontiguousarray(x, dtype="<f8").data.cast("B")

        def requests() -> Iterator[pb.UploadVectorRequest]:
            yield pb.UploadVectorRequest(metadata=pb.VectorMetadata(length=x.shape[0], name=name))
            for i in range(0, len(data), self.chunk_bytes):
                yield pb.UploadVectorRequest(chunk=bytes(data[i:i + self.chunk_bytes]))

        return self._call(self._stub.UploadVector, requests()).id

    # --- solves -----------------------------------------------------------

    def solve(self, matrix_or_id: MatrixLike, b: Any, x0: Any = None, *, method: str = "auto",
              precond: str = "auto", rtol: float = 0.0, atol: float = 0.0, max_iter: int = 0,
              time_limit: Union[None, float, datetime.timedelta] = None, least_squares: bool = False,
              btol: float = 0.0, damp: float = 0.0, progress: Optional[ProgressCallback] = None,
              progress_every: int = 0, progress_interval: Optional[float] = None, check: bool = True,
              label: str = "") -> Solution:
        """Solves A·x = b (or, for least squares, min ‖A·x − b‖₂) on the
        server and returns the solution and its summary.

        matrix_or_id is a scipy.sparse matrix (uploaded only when the
        server does not hold it), a Matrix Market file path (a
        pathlib.Path or any os.PathLike; uploaded), a Matrix an upload
        returned, or a stored matrix's id (str). b is a vector of A's row
        count, or an n×k array whose k columns are solved as k right-hand
        sides in one job with one preconditioner set-up; x has b's shape.
        x0 is None (zeros), one vector for all columns, or an array of b's
        shape.

        method is "auto" (conjugate gradients, or LSQR for least squares),
        "cg", "lsqr" or "cgls" (both least squares); precond "auto",
        "none", "jacobi" or "ic0" for CG, "auto", "colscale" or "none" for
        least squares. rtol, atol, max_iter, time_limit (seconds), btol
        and damp are the service's settings; 0 means its default (rtol
        1e-8, at most 10·n iterations, no time limit).

        progress, if given, is called in this thread with each Progress
        event (iteration 0 first, at most one per iteration), every
        progress_every iterations and/or every progress_interval seconds
        (both unset: the server's 200 ms). If it raises, the job is
        cancelled and the exception propagates; so does KeyboardInterrupt.

        With check (the default) a job that did not converge raises
        SolveError with its outcome word, summaries and what x arrived;
        with check=False the Solution is returned whatever the outcome the
        job ran to. A refused request raises RequestError (InputError,
        NotFoundError, LimitError).
        """
        req, shape, stored = self._request(matrix_or_id, b, x0, method=method, precond=precond, rtol=rtol,
                                             atol=atol, max_iter=max_iter, time_limit=time_limit,
                                             least_squares=least_squares, btol=btol, damp=damp,
                                             progress_every=progress_every, progress_interval=progress_interval,
                                             label=label)
        call = self._stub.Solve(req, metadata=self._metadata)
        return self._follow(call, progress, shape=shape, check=check, stored=stored)

    def submit(self, matrix_or_id: MatrixLike, b: Any, x0: Any = None, *, method: str = "auto",
               precond: str = "auto", rtol: float = 0.0, atol: float = 0.0, max_iter: int = 0,
               time_limit: Union[None, float, datetime.timedelta] = None, least_squares: bool = False,
               btol: float = 0.0, damp: float = 0.0, progress_every: int = 0,
               progress_interval: Optional[float] = None, label: str = "") -> str:
        """Starts a detached job (it outlives this call and keeps its
        solutions on the server) with solve's arguments, and returns its
        id; follow it with watch, stop it with cancel."""
        req, _, _ = self._request(matrix_or_id, b, x0, method=method, precond=precond, rtol=rtol, atol=atol,
                                  max_iter=max_iter, time_limit=time_limit, least_squares=least_squares,
                                  btol=btol, damp=damp, progress_every=progress_every,
                                  progress_interval=progress_interval, label=label)
        req.detach = True
        job_id = ""
        call = self._stub.Solve(req, metadata=self._metadata)
        try:
            for ev in call:
                job_id = job_id or ev.job_id
        except grpc.RpcError as e:
            raise errors.from_rpc(e) from None
        if not job_id:
            raise errors.ResiduaError("residua: the server ended the detached solve without a job id")
        return job_id

    def watch(self, job_id: str, progress: Optional[ProgressCallback] = None, *, check: bool = True,
              fetch: bool = True) -> Solution:
        """Follows a job until it finishes: replays its events so far, then
        live, calling progress as solve does (interrupting stops watching
        only, the job goes on). With fetch, the solutions the job kept (a
        detached job keeps them) are downloaded into x: a vector for a job
        of one right-hand side, n×k for k, NaN where a solution is missing
        (a right-hand side not reached, a set-up that failed). check is as
        for solve."""
        call = self._stub.Watch(pb.WatchRequest(job_id=job_id), metadata=self._metadata)
        sol = self._follow(call, progress, shape=None, check=False, stored=None)
        job = self.job(job_id) if fetch else None
        if job is not None and job.solution_kept:
            # x has as many entries as A has columns (for a system, rows).
            x = np.full((job.cols, job.rhs_count), np.nan)
            for s in sol.summaries:
                if s.status == "setup-failed":
                    continue
                try:
                    x[:, s.rhs_index] = self.download(job_id, s.rhs_index)
                except errors.NotFoundError:
                    pass  # evicted under memory pressure: left NaN
            sol = dataclasses.replace(sol, x=x[:, 0] if job.rhs_count == 1 else x)
        if check and not sol.converged:
            raise _solve_error(sol, "")
        return sol

    def download(self, job_id: str, rhs: int = 0) -> np.ndarray:
        """The solution of right-hand side rhs (0-based) of a finished job
        that kept it, checked against the length and SHA-256 the server
        sends."""
        call = self._stub.DownloadSolution(pb.DownloadSolutionRequest(job_id=job_id, rhs=rhs),
                                           metadata=self._metadata)
        a = _Assembler(rhs)
        try:
            for c in call:
                if a.add(c):
                    return a.vector()
        except grpc.RpcError as e:
            raise errors.from_rpc(e) from None
        raise errors.ResiduaError("residua: the solution of right-hand side %d ended before its last chunk" % rhs)

    def cancel(self, job_id: str) -> Job:
        """Cancels a queued or running job (a running solve stops within
        one iteration) and returns the job as it is after the request;
        cancelling a finished job changes nothing."""
        return Job.from_pb(self._call(self._stub.CancelJob, pb.CancelJobRequest(job_id=job_id)), time.time(),
                           self.address)

    def job(self, job_id: str) -> Job:
        """Describes one job; NotFoundError for an unknown id."""
        return Job.from_pb(self._call(self._stub.GetJob, pb.GetJobRequest(job_id=job_id)), time.time(),
                           self.address)

    def jobs(self) -> list[Job]:
        """The queued, running and recently finished jobs, newest first."""
        now = time.time()
        return [Job.from_pb(j, now, self.address)
                for j in self._call(self._stub.ListJobs, pb.ListJobsRequest()).jobs]

    def history(self, job_id: str, rhs: int = 0) -> list[Progress]:
        """The convergence history the server recorded for right-hand side
        rhs of a job: every iteration up to its budget of rows, past which
        the rows are evenly spaced samples with the first and last exact."""
        h = self._call(self._stub.GetHistory, pb.GetHistoryRequest(job_id=job_id, rhs=rhs))
        return [Progress.from_pb(job_id, p) for p in h.rows]

    # --- the request and the event stream ---------------------------------

    def _resolve(self, matrix_or_id: MatrixLike) -> tuple[Matrix, Optional[bool]]:
        """The stored matrix a solve uses, uploading it if need be, and
        whether it was uploaded (None when given by id)."""
        if isinstance(matrix_or_id, Matrix):
            return matrix_or_id, None
        if isinstance(matrix_or_id, str):
            return self.matrix(matrix_or_id), None
        if isinstance(matrix_or_id, os.PathLike):
            m = self.upload(matrix_or_id)
            return m, not m.already_stored
        return self.ensure(matrix_or_id)

    def _request(self, matrix_or_id: MatrixLike, b: Any, x0: Any, *, method: str, precond: str, rtol: float,
                 atol: float, max_iter: int, time_limit: Union[None, float, datetime.timedelta],
                 least_squares: bool, btol: float, damp: float, progress_every: int,
                 progress_interval: Optional[float], label: str
                 ) -> tuple[pb.SolveRequest, tuple[int, ...], "_Uploaded"]:
        m, uploaded = self._resolve(matrix_or_id)
        lsq = least_squares or method in _LEAST_SQUARES_METHODS
        bs, single = _columns("b", b, m.rows)
        x_len = m.cols if lsq else m.rows
        x0s: list[np.ndarray] = []
        if x0 is not None:
            x0s, x0_single = _columns("x0", x0, x_len)
            if not x0_single and len(x0s) != len(bs):
                raise ValueError("residua: x0 has %d columns and b %d" % (len(x0s), len(bs)))
        req = pb.SolveRequest(matrix_id=m.id, method="" if method == "auto" else method,
                              preconditioner="" if precond == "auto" else precond, rtol=rtol, atol=atol,
                              max_iter=max_iter, least_squares=lsq, btol=btol, damp=damp, label=label,
                              progress=pb.ProgressPolicy(every_iterations=progress_every))
        if progress_interval:
            req.progress.interval.CopyFrom(_duration(progress_interval))
        if time_limit:
            req.time_limit.CopyFrom(_duration(time_limit))
        budget = INLINE_BYTES
        for what, vs, dst in (("rhs", bs, req.rhs), ("x0", x0s, req.x0)):
            for i, v in enumerate(vs):
                if v.nbytes <= budget:
                    budget -= v.nbytes
                    dst.append(pb.VectorRef(data=v.tobytes()))
                else:
                    dst.append(pb.VectorRef(vector_id=self._upload_vector(v, "%s %d" % (what, i))))
        shape = (x_len,) if single else (x_len, len(bs))
        return req, shape, _Uploaded(uploaded, m.upload_seconds if uploaded else None)

    def _follow(self, call: Any, progress: Optional[ProgressCallback], *, shape: Optional[tuple[int, ...]],
                check: bool, stored: Optional["_Uploaded"]) -> Solution:
        """Reads a job's event stream to its end (the .proto's Solve
        contract) and returns what it brought."""
        job_id, accepted, finished = "", None, None
        results: list[pb.SolveResult] = []
        parts: dict[int, _Assembler] = {}
        rpc_error: Optional[grpc.RpcError] = None
        try:
            for ev in call:
                job_id = job_id or ev.job_id
                kind = ev.WhichOneof("event")
                if kind == "accepted":
                    accepted = ev.accepted
                elif kind == "progress":
                    if progress is not None:
                        progress(Progress.from_pb(job_id, ev.progress))
                elif kind == "result":
                    results.append(ev.result)
                elif kind == "solution":
                    c = ev.solution
                    parts.setdefault(c.rhs, _Assembler(c.rhs)).add(c)
                elif kind == "finished":
                    finished = ev.finished
        except grpc.RpcError as e:
            rpc_error = e
        except BaseException:
            # The callback raised, or the user interrupted: ending the
            # stream cancels the attached job.
            call.cancel()
            raise
        if finished is None:
            if rpc_error is not None:
                raise errors.from_rpc(rpc_error) from None
            raise errors.ResiduaError("residua: job %s: the stream ended before the job finished" % job_id)
        single = shape is not None and len(shape) == 1
        up = stored or _Uploaded(None, None)
        summaries = [Summary.from_pb(r, rhs="b" if single else "b[:, %d]" % r.rhs, server=self.address,
                                     job_id=job_id, matrix_uploaded=up.uploaded, upload_seconds=up.seconds)
                     for r in results]
        x = None
        if shape is not None:
            k = 1 if single else shape[1]
            cols = np.full((shape[0], k), np.nan)
            for r in results:
                a = parts.get(r.rhs)
                if a is not None and a.done:
                    cols[:, r.rhs] = a.vector()
                elif r.status != "setup-failed" and finished.outcome == "converged":
                    raise errors.ResiduaError("residua: job %s: the solution of right-hand side %d did not arrive"
                                              % (job_id, r.rhs))
            x = cols[:, 0] if single else cols
        sol = Solution(x=x, summaries=summaries, job_id=job_id, outcome=finished.outcome,
                       preconditioner=accepted.preconditioner if accepted else "",
                       preconditioner_reason=accepted.preconditioner_reason if accepted else "",
                       dropped_progress=finished.dropped_progress, error=finished.error or None)
        if check and not sol.converged:
            code = rpc_error.code().name if rpc_error is not None else ""
            raise _solve_error(sol, code)
        return sol


class _Uploaded(NamedTuple):
    """Whether a solve uploaded its matrix (None when it was given by id)
    and the server's receive and parse time if it did: the summary's
    matrix_uploaded and upload_seconds."""

    uploaded: Optional[bool]
    seconds: Optional[float]


class _Assembler:
    """Rebuilds one solution vector from its chunks, checking that each
    follows the last, that the length is the one announced, and the
    SHA-256 of the last chunk (the .proto's VectorChunk)."""

    def __init__(self, rhs: int) -> None:
        self.rhs = rhs
        self.length = -1
        self.received = 0
        self.parts: list[bytes] = []
        self.h = hashlib.sha256()
        self.done = False

    def _fail(self, why: str) -> errors.ResiduaError:
        return errors.ResiduaError("residua: the solution of right-hand side %d arrived incomplete or altered: %s"
                                   % (self.rhs, why))

    def add(self, c: pb.VectorChunk) -> bool:
        """Takes the next chunk; returns whether the vector is complete."""
        if self.done:
            raise self._fail("a chunk after the last one")
        if self.length < 0:
            self.length = c.length
        if c.length != self.length:
            raise self._fail("a chunk announces %d entries, the first %d" % (c.length, self.length))
        if c.offset != self.received:
            raise self._fail("the chunk at entry %d does not follow entry %d" % (c.offset, self.received))
        if len(c.data) % 8 or self.received + len(c.data) // 8 > self.length:
            raise self._fail("a chunk of %d bytes at entry %d of %d" % (len(c.data), c.offset, self.length))
        self.parts.append(c.data)
        self.h.update(c.data)
        self.received += len(c.data) // 8
        if not c.last:
            return False
        self.done = True
        if self.received != self.length:
            raise self._fail("%d of its %d entries" % (self.received, self.length))
        if c.sha256 != self.h.hexdigest():
            raise self._fail("SHA-256 %s, the server's %r" % (self.h.hexdigest(), c.sha256))
        return True

    def vector(self) -> np.ndarray:
        return np.frombuffer(b"".join(self.parts), dtype="<f8").astype(np.float64)


def _columns(what: str, v: Any, n: int) -> tuple[list[np.ndarray], bool]:
    """Splits a vector or an n×k array into k little-endian float64
    columns; the flag says it was a vector. Raises ValueError for a wrong
    shape or a value that is not finite."""
    a = np.asarray(v)
    if np.iscomplexobj(a):
        raise TypeError("residua: %s is complex; residua solves real systems" % what)
    a = a.astype(np.float64, copy=False)
    if a.ndim not in (1, 2) or a.shape[0] != n or (a.ndim == 2 and a.shape[1] == 0):
        raise ValueError("residua: %s has shape %s; the matrix needs %d rows (a vector, or %d×k)"
                         % (what, a.shape, n, n))
    bad = np.argwhere(~np.isfinite(a))
    if bad.size:
        raise ValueError("residua: %s[%s] is %r; every entry must be finite"
                         % (what, ", ".join(str(int(i)) for i in bad[0]), a[tuple(bad[0])]))
    if a.ndim == 1:
        return [np.ascontiguousarray(a, dtype="<f8")], True
    return [np.ascontiguousarray(a[:, j], dtype="<f8") for j in range(a.shape[1])], False


def _duration(v: Union[float, datetime.timedelta]) -> duration_pb2.Duration:
    d = duration_pb2.Duration()
    if isinstance(v, datetime.timedelta):
        d.FromTimedelta(v)
    else:
        if v < 0:
            raise ValueError("residua: a negative duration %r" % v)
        d.FromNanoseconds(int(round(v * 1e9)))
    return d


def _solve_error(sol: Solution, code: str) -> errors.SolveError:
    """The SolveError of a job that did not converge: its error, or the
    headline of the first right-hand side that did not converge."""
    why = sol.error or next((s.headline for s in sol.summaries if not s.converged), "")
    msg = "job %s: %s" % (sol.job_id, why) if why else "job %s ended %s" % (sol.job_id, sol.outcome)
    return errors.SolveError(msg, outcome=sol.outcome, code=code, job_id=sol.job_id, summaries=sol.summaries,
                             x=sol.x)
