"""residua: the Python client of the residua solver service.

A simulation code on NumPy and SciPy uploads its sparse matrix once and
solves with it as often as it needs, on a machine that runs
`residua serve`::

    import numpy as np, scipy.sparse as sp
    import residua

    with residua.Client("127.0.0.1:7447") as client:
        sol = client.solve(A, b, precond="jacobi", rtol=1e-10)
        print(sol.summary.headline)
        x = sol.x

Client is the connection; upload, ensure, solve, submit, watch, cancel,
jobs and download are its calls. A solve returns a Solution: x as a NumPy
array of b's shape and one Summary per right-hand side, with the keys of
the JSON summary the README documents. Failures are the exceptions of
residua.errors, each carrying the documented outcome word.
"""

from . import errors
from ._csr import RawCSR, matrix_id, to_raw_csr
from ._types import Job, Matrix, Progress, Solution, Summary
from .client import Client
from .errors import (AuthError, InputError, LimitError, NotFoundError, RequestError, ResiduaError, SolveError,
                     UnavailableError)

__all__ = [
    "Client", "Solution", "Summary", "Progress", "Job", "Matrix", "RawCSR", "matrix_id", "to_raw_csr",
    "errors", "ResiduaError", "RequestError", "InputError", "NotFoundError", "LimitError", "AuthError",
    "UnavailableError", "SolveError",
]
