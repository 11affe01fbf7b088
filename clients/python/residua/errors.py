"""The exceptions of the residua client.

Every one is a ResiduaError carrying the outcome word the README documents
(States and outcomes: converged, iteration-limit, time-limit, stagnated,
cancelled, breakdown, setup-failed, refused, failed) and, when the service
said it, the gRPC status code's name and the server's message.

- RequestError (outcome "refused"): the server refused the request or the
  matrix before any work. InputError is a malformed upload and says where:
  the line and column of a Matrix Market file, or the byte offset and row
  of a CSR_RAW encoding. NotFoundError is an unknown matrix, vector or job
  id; LimitError a server limit (upload size, dimensions, right-hand sides,
  queue, memory budget).
- SolveError: the job ran but did not converge (iteration-limit,
  time-limit, stagnated, cancelled, breakdown, setup-failed or failed); it
  carries the summaries and solutions that arrived.
- AuthError, UnavailableError and the plain ResiduaError (outcome
  "failed"): a missing or wrong token, a server shutting down or out of
  reach, anything else.
"""

from __future__ import annotations

import re
from typing import TYPE_CHECKING, Optional

if TYPE_CHECKING:
    import grpc
    import numpy as np

    from ._types import Summary


class ResiduaError(Exception):
    """Base of the client's errors: outcome is the documented outcome word,
    code the gRPC status code's name ("" when the error is the client's),
    message the server's words."""

    def __init__(self, message: str, *, outcome: str = "failed", code: str = "") -> None:
        super().__init__(message)
        self.message = message
        self.outcome = outcome
        self.code = code

    def __str__(self) -> str:
        if self.code:
            return "%s (%s, %s)" % (self.message, self.outcome, self.code)
        return "%s (%s)" % (self.message, self.outcome)


class RequestError(ResiduaError):
    """The server refused the request or the matrix before doing any work."""

    def __init__(self, message: str, *, code: str = "") -> None:
        super().__init__(message, outcome="refused", code=code)


class InputError(RequestError):
    """A malformed upload or request (INVALID_ARGUMENT). For a Matrix Market
    upload the server names the line (and column) of the first bad entry;
    for a CSR_RAW upload the byte offset, the array and the row. Each of
    those attributes is None when the message does not give it.
    line, column and row count from 1, offset from 0."""

    # "NAME:LINE:COLUMN: reason" or "NAME:LINE: reason" (matrixio.ParseError).
    _mm = re.compile(r"(?P<source>\S+?):(?P<line>\d+)(?::(?P<column>\d+))?: ")
    # "byte OFFSET (ARRAY entry I[, row R]): reason" (wire.RawError).
    _raw = re.compile(r"byte (?P<offset>\d+) \((?P<array>[a-z ]+) entry (?P<index>\d+)(?:, row (?P<row>\d+))?\)")

    def __init__(self, message: str, *, code: str = "INVALID_ARGUMENT") -> None:
        super().__init__(message, code=code)
        self.source: Optional[str] = None
        self.line: Optional[int] = None
        self.column: Optional[int] = None
        self.offset: Optional[int] = None
        self.array: Optional[str] = None
        self.row: Optional[int] = None
        m = self._raw.search(message)
        if m:
            self.offset = int(m["offset"])
            self.array = m["array"]
            self.row = int(m["row"]) if m["row"] else None
            return
        m = self._mm.search(message)
        if m:
            self.source = m["source"]
            self.line = int(m["line"])
            self.column = int(m["column"]) if m["column"] else None


class NotFoundError(RequestError):
    """An unknown matrix, vector or job id, or a solution not kept."""


class LimitError(RequestError):
    """A server limit: upload bytes, dimensions, nonzeros, right-hand sides,
    the solve queue or the memory budget (RESOURCE_EXHAUSTED)."""


class AuthError(ResiduaError):
    """A missing or wrong bearer token (UNAUTHENTICATED)."""


class UnavailableError(ResiduaError):
    """The server is shutting down or cannot be reached (UNAVAILABLE)."""


class SolveError(ResiduaError):
    """The job ran but did not converge: outcome says how it ended. The
    summaries of the right-hand sides that finished, the solutions that
    arrived (x, b's shape, None when none did) and the job's id come with
    it."""

    def __init__(self, message: str, *, outcome: str, code: str = "", job_id: str = "",
                 summaries: Optional[list["Summary"]] = None, x: Optional["np.ndarray"] = None) -> None:
        super().__init__(message, outcome=outcome, code=code)
        self.job_id = job_id
        self.summaries = summaries or []
        self.x = x


def from_rpc(err: "grpc.RpcError") -> ResiduaError:
    """The client's exception for a failed call (see the .proto's list of
    codes and what each means)."""
    import grpc

    code = err.code() if hasattr(err, "code") else None
    message = (err.details() if hasattr(err, "details") else None) or str(err)
    name = code.name if code is not None else ""
    if code == grpc.StatusCode.INVALID_ARGUMENT:
        return InputError(message, code=name)
    if code == grpc.StatusCode.NOT_FOUND:
        return NotFoundError(message, code=name)
    if code == grpc.StatusCode.RESOURCE_EXHAUSTED:
        return LimitError(message, code=name)
    if code == grpc.StatusCode.FAILED_PRECONDITION:
        # Before a job exists: conjugate gradients on a matrix that is not
        # square and symmetric, or a matrix that jobs still use.
        return RequestError(message, code=name)
    if code == grpc.StatusCode.UNAUTHENTICATED:
        return AuthError(message, code=name)
    if code == grpc.StatusCode.UNAVAILABLE:
        return UnavailableError(message, code=name)
    if code == grpc.StatusCode.CANCELLED:
        return ResiduaError(message, outcome="cancelled", code=name)
    return ResiduaError(message, code=name)
