"""Upload throughput of the Python client: the same matrix sent as CSR_RAW
from SciPy and as Matrix Market text from a file, to one server, in one run.

    python3 clients/python/bench_upload.py HOST:PORT [N]

The matrix is the 5-point Laplacian on an N×N grid (default 600: 360,000
rows, 1.8 million entries). Each upload goes to a fresh copy (the matrix
is deleted first), so the server parses it every time. Prints one JSON
line: the encoding's bytes, seconds and MB/s of each, and their ratio.
"""

from __future__ import annotations

import json
import os
import sys
import tempfile
import time

import scipy.io
import scipy.sparse as sp

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import residua  # noqa: E402


def main() -> None:
    address = sys.argv[1]
    n = int(sys.argv[2]) if len(sys.argv) > 2 else 600
    t = sp.diags([-1.0, 2.0, -1.0], [-1, 0, 1], shape=(n, n))
    a = sp.csr_matrix(sp.kron(sp.identity(n), t) + sp.kron(t, sp.identity(n)))
    out: dict[str, float] = {"rows": a.shape[0], "nonzeros": a.nnz}
    with residua.Client(address) as c, tempfile.TemporaryDirectory() as d:
        path = os.path.join(d, "plate.mtx")
        scipy.io.mmwrite(path, a, symmetry="general")
        for what, src, size in (("csr_raw", a, residua.to_raw_csr(a).nbytes),
                                ("matrix_market", path, os.path.getsize(path))):
            try:
                c.delete(residua.matrix_id(a))
            except residua.NotFoundError:
                pass
            start = time.perf_counter()
            m = c.upload(src)
            s = time.perf_counter() - start
            out[what + "_bytes"], out[what + "_seconds"] = size, s
            out[what + "_mb_per_s"] = size / s / 1e6
            out[what + "_server_seconds"] = m.upload_seconds
    out["seconds_ratio_text_over_raw"] = out["matrix_market_seconds"] / out["csr_raw_seconds"]
    print(json.dumps(out))


if __name__ == "__main__":
    main()
