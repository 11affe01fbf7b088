"""The values the client returns: a solve's Summary (the documented JSON
summary), a Progress row, a Job record, a stored Matrix, and a Solution.

Each converts from the service's protobuf message in one place (the
from_pb functions), as package wire does for the Go tree.
"""

from __future__ import annotations

import dataclasses
import json
import math
from dataclasses import dataclass, field
from typing import Any, Optional

import numpy as np

from .v1 import residua_pb2 as pb


def _opt(msg: Any, name: str) -> Any:
    """An optional proto3 field: its value, or None when it is absent."""
    return getattr(msg, name) if msg.HasField(name) else None


def _json_number(v: Any) -> Any:
    """A float as residua writes it in JSON: NaN and ±Inf as the strings
    "NaN", "+Inf" and "-Inf" (README, States and outcomes)."""
    if isinstance(v, float):
        if math.isnan(v):
            return "NaN"
        if math.isinf(v):
            return "+Inf" if v > 0 else "-Inf"
    return v


@dataclass(frozen=True)
class Summary:
    """The outcome of one right-hand side's solve, with the keys of the JSON
    summary that `residua solve --json` prints (README, `residua solve` and
    `residua lsq`; solve.Summary in the Go tree). A figure that does not
    apply (one of the other method) or is not known is None, where the JSON
    leaves its key out.

    The front-end keys this client cannot know are absent (read_seconds,
    error_vs_ones, the files written); rhs says which column of b this was.
    """

    # The outcome.
    converged: bool
    status: str
    headline: str
    method: str
    rhs_index: int
    iterations: int
    relative_residual: float
    true_residual_norm: float
    rhs_norm: float
    preconditioner: str
    setup_seconds: float
    solve_seconds: float
    seconds_per_iteration: float
    cond_estimate: float
    atol: float
    max_iter: int
    time_limit_seconds: float
    matrix: str
    rows: int
    cols: int
    nonzeros: int
    rhs: str
    error: Optional[str] = None
    advice: Optional[str] = None  # for a failure or a breakdown: what can be done
    recursive_relative_residual: Optional[float] = None
    recursive_residual_norm: Optional[float] = None
    # Least squares only.
    residual_norm: Optional[float] = None
    normal_residual_norm: Optional[float] = None
    x_norm: Optional[float] = None
    norm_estimate: Optional[float] = None
    stopped_by: Optional[str] = None
    zero_columns: Optional[list[int]] = None
    # The preconditioner.
    preconditioner_reason: Optional[str] = None
    shift: Optional[float] = None
    shift_tries: Optional[int] = None
    preconditioner_bytes: Optional[int] = None
    lambda_min_estimate: Optional[float] = None
    lambda_max_estimate: Optional[float] = None
    # How far x can be trusted.
    forward_error_estimate: Optional[float] = None
    forward_error_note: Optional[str] = None
    warning: Optional[str] = None
    warning_text: Optional[str] = None
    # The settings used, defaults filled in.
    rtol: Optional[float] = None
    btol: Optional[float] = None
    damp: Optional[float] = None
    refresh_every: Optional[int] = None
    # Remote solves.
    server: Optional[str] = None
    job_id: Optional[str] = None
    matrix_id: Optional[str] = None
    matrix_uploaded: Optional[bool] = None
    upload_seconds: Optional[float] = None
    preconditioner_from_cache: Optional[bool] = None

    @classmethod
    def from_pb(cls, r: pb.SolveResult, *, rhs: str = "", server: Optional[str] = None,
                job_id: Optional[str] = None, matrix_uploaded: Optional[bool] = None,
                upload_seconds: Optional[float] = None) -> "Summary":
        """Converts the service's result message (the field map is
        wire.Summary's in the Go tree; the .proto names the key beside a
        field whose name differs)."""
        st = r.settings
        return cls(
            converged=r.converged, status=r.status, headline=r.headline, method=r.method,
            rhs_index=r.rhs, iterations=r.iterations, relative_residual=r.relative_residual,
            true_residual_norm=r.true_residual_norm, rhs_norm=r.rhs_norm,
            preconditioner=r.preconditioner, setup_seconds=r.setup_seconds, solve_seconds=r.solve_seconds,
            seconds_per_iteration=r.per_iteration_seconds, cond_estimate=r.cond,
            atol=st.atol, max_iter=st.max_iter, time_limit_seconds=st.time_limit_seconds,
            matrix=r.matrix, rows=r.rows, cols=r.cols, nonzeros=r.nonzeros, rhs=rhs,
            error=r.error or None,
            advice=r.advice or None,
            recursive_relative_residual=_opt(r, "recursive_relative_residual"),
            recursive_residual_norm=_opt(r, "recursive_residual_norm"),
            residual_norm=_opt(r, "residual_norm"),
            normal_residual_norm=_opt(r, "normal_residual_norm"),
            x_norm=_opt(r, "x_norm"),
            norm_estimate=_opt(r, "a_norm_estimate"),
            stopped_by=r.stopped_by or None,
            zero_columns=list(r.zero_columns) or None,
            preconditioner_reason=r.preconditioner_reason or None,
            shift=_opt(r, "shift"),
            shift_tries=r.shift_tries or None,
            preconditioner_bytes=_opt(r, "preconditioner_bytes"),
            lambda_min_estimate=_opt(r, "lambda_min"),
            lambda_max_estimate=_opt(r, "lambda_max"),
            forward_error_estimate=_opt(r, "forward_error_estimate"),
            forward_error_note=r.forward_error_note or None,
            warning=r.warning or None,
            warning_text=r.warning_text or None,
            rtol=_opt(st, "rtol"), btol=_opt(st, "btol"), damp=_opt(st, "damp"),
            refresh_every=st.refresh_every or None,
            server=server, job_id=job_id, matrix_id=r.matrix_id or None,
            matrix_uploaded=matrix_uploaded, upload_seconds=upload_seconds,
            preconditioner_from_cache=r.from_cache,
        )

    def to_dict(self) -> dict[str, Any]:
        """The summary as the JSON object residua prints: the keys that are
        known (None ones left out), NaN and ±Inf as strings."""
        out: dict[str, Any] = {}
        for f in dataclasses.fields(self):
            v = getattr(self, f.name)
            if v is None:
                continue
            out[f.name] = [_json_number(e) for e in v] if isinstance(v, list) else _json_number(v)
        return out

    def to_json(self) -> str:
        """The summary as one line of JSON (see to_dict)."""
        return json.dumps(self.to_dict())


@dataclass(frozen=True)
class Progress:
    """One row of a convergence history, as a progress event brings it."""

    job_id: str
    rhs: int  # the right-hand side (0-based, the column of b)
    iteration: int  # iterations done; 0 is the initial residual
    elapsed_seconds: float  # since this right-hand side's solve began
    residual_norm: float  # ‖b − A·x‖₂ as the method tracks it
    relative_residual: float  # residual_norm/‖b‖₂
    normal_residual_norm: float  # least squares: ‖Aᵀr‖₂ (0 for CG)

    @classmethod
    def from_pb(cls, job_id: str, p: pb.Progress) -> "Progress":
        return cls(job_id=job_id, rhs=p.rhs, iteration=p.iteration, elapsed_seconds=p.elapsed_seconds,
                   residual_norm=p.residual_norm, relative_residual=p.relative_residual,
                   normal_residual_norm=p.normal_residual_norm)


_STATE_WORDS = {pb.QUEUED: "queued", pb.RUNNING: "running", pb.DONE: "done"}

_LEAST_SQUARES_METHODS = ("lsqr", "cgls")


@dataclass(frozen=True)
class Job:
    """A job as `residua jobs --json` and the watch page's /api/jobs
    describe it (README, Remote solves), plus its results so far (as
    /api/jobs/ID adds them). The latest figures (rhs, iteration,
    relative_residual, normal_residual_norm) are those of the last finished
    right-hand side, or of the latest progress when it is further on."""

    id: str
    label: str
    state: str  # queued, running or done
    outcome: Optional[str]  # once done: how it ended
    matrix: str
    matrix_id: str
    rows: int
    cols: int
    nonzeros: int
    method: str
    preconditioner: str
    rhs_count: int
    rhs_done: int
    rhs: int
    iteration: int
    relative_residual: Optional[float]
    normal_residual_norm: Optional[float]
    tolerance: float
    elapsed_seconds: float
    detached: bool
    solution_kept: bool
    error: Optional[str]
    created_unix: float
    started_unix: float
    finished_unix: float
    results: list[Summary] = field(default_factory=list)

    @classmethod
    def from_pb(cls, j: pb.Job, now: float, server: Optional[str] = None) -> "Job":
        """Converts the service's Job message as of the Unix time now (the
        rules of wire.JobRecord in the Go tree)."""
        least_squares = j.method in _LEAST_SQUARES_METHODS
        rhs, iteration, rel, normal = 0, 0, None, None
        if j.HasField("last_progress"):
            lp = j.last_progress
            rhs, iteration, rel = lp.rhs, lp.iteration, lp.relative_residual
            if least_squares:
                normal = lp.normal_residual_norm
        if j.results and j.results[-1].rhs >= rhs:
            r = j.results[-1]
            rhs, iteration, rel = r.rhs, r.iterations, r.relative_residual
            if least_squares and r.HasField("normal_residual_norm"):
                normal = r.normal_residual_norm
        if j.started_unix == 0:
            elapsed = 0.0
        elif j.finished_unix != 0:
            elapsed = j.finished_unix - j.started_unix
        else:
            elapsed = max(0.0, now - j.started_unix)
        return cls(
            id=j.id, label=j.label, state=_STATE_WORDS.get(j.state, ""), outcome=j.outcome or None,
            matrix=j.matrix_name or j.matrix_id, matrix_id=j.matrix_id, rows=j.rows, cols=j.cols,
            nonzeros=j.nonzeros, method=j.method, preconditioner=j.preconditioner or j.preconditioner_requested,
            rhs_count=j.rhs_count, rhs_done=j.rhs_done, rhs=rhs, iteration=iteration,
            relative_residual=rel, normal_residual_norm=normal, tolerance=j.rtol,
            elapsed_seconds=elapsed, detached=j.detached, solution_kept=j.solution_kept,
            error=j.error or None, created_unix=j.created_unix, started_unix=j.started_unix,
            finished_unix=j.finished_unix,
            results=[Summary.from_pb(r, rhs="b[:, %d]" % r.rhs, server=server, job_id=j.id) for r in j.results],
        )


@dataclass(frozen=True)
class Matrix:
    """A matrix stored on the server (the reply to an upload)."""

    id: str  # the content hash (see matrix_id)
    name: str
    rows: int
    cols: int
    nonzeros: int  # stored entries, both triangles of a symmetric file
    symmetry: str  # "symmetric" or "general"
    bytes: int  # server memory it occupies
    already_stored: bool  # this upload found it stored
    upload_seconds: float
    upload_bytes: int
    jobs_using: int
    inspect: dict[str, Any]  # the `residua inspect --json` report

    @classmethod
    def from_pb(cls, m: pb.Matrix) -> "Matrix":
        return cls(id=m.id, name=m.name, rows=m.rows, cols=m.cols, nonzeros=m.nonzeros, symmetry=m.symmetry,
                   bytes=m.bytes, already_stored=m.already_stored, upload_seconds=m.upload_seconds,
                   upload_bytes=m.upload_bytes, jobs_using=m.jobs_using,
                   inspect=json.loads(m.inspect_json) if m.inspect_json else {})


@dataclass(frozen=True)
class Solution:
    """What a solve or a watch returned.

    x has b's shape (n for a vector b, n×k for k columns; for least squares
    A's column count in place of n), or is None when the solutions were not
    fetched. summaries holds one Summary per right-hand side that finished,
    in order. outcome is the job's: the first status that was not
    "converged", or "converged".
    """

    x: Optional[np.ndarray]
    summaries: list[Summary]
    job_id: str
    outcome: str
    preconditioner: str  # the kind chosen ("none", "jacobi", "ic0", ...)
    preconditioner_reason: str
    dropped_progress: int  # progress events the server dropped for a slow reader
    error: Optional[str] = None

    @property
    def converged(self) -> bool:
        """Every right-hand side converged."""
        return self.outcome == "converged"

    @property
    def summary(self) -> Summary:
        """The one summary of a solve with a single right-hand side."""
        if len(self.summaries) != 1:
            raise ValueError("residua: this job has %d summaries; use .summaries" % len(self.summaries))
        return self.summaries[0]
