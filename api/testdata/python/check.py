"""A residua client that is not ours: Python stubs generated from
proto/residua/v1/residua.proto by Debian's protoc and grpc_python_plugin,
driven with Debian's python3-grpcio and python3-protobuf.

It checks the standard health service, uploads a Matrix Market file in
chunks, solves A x = A 1 with progress events and the solution streamed back,
checks the true residual of the x it received (computed here, in Python,
from the file), watches the finished job (the replay must match), and runs a
detached solve that it follows with Watch and fetches with DownloadSolution.

Usage (the Go test TestPythonClient runs it; PYTHONPATH must hold the
generated stubs):

    python3 check.py ADDRESS MATRIX.mtx [RECTANGULAR.mtx]

It prints one JSON line with what it saw and exits 1 on a failed check.
"""

import json
import math
import struct
import sys

import grpc
from google.protobuf import duration_pb2

from residua.v1 import residua_pb2 as pb
from residua.v1 import residua_pb2_grpc as pbg

CHUNK = 64 * 1024
RTOL = 1e-8


def fail(msg):
    print("check.py: FAIL: " + msg, file=sys.stderr)
    sys.exit(1)


def read_matrix_market(path):
    """Reads a coordinate real/integer general or symmetric Matrix Market file
    (Boisvert, Pozo, Remington, NIST 1996) into a list of (i, j, v), 0-based,
    with symmetric storage expanded."""
    with open(path) as f:
        banner = f.readline().split()
        if banner[:3] != ["%%MatrixMarket", "matrix", "coordinate"]:
            fail("unsupported file " + path)
        symmetric = banner[4].lower() == "symmetric"
        line = f.readline()
        while line.startswith("%"):
            line = f.readline()
        rows, cols, nnz = (int(t) for t in line.split())
        entries = []
        for _ in range(nnz):
            t = f.readline().split()
            i, j, v = int(t[0]) - 1, int(t[1]) - 1, float(t[2])
            entries.append((i, j, v))
            if symmetric and i != j:
                entries.append((j, i, v))
    return rows, cols, entries


def matvec(rows, entries, x):
    y = [0.0] * rows
    for i, j, v in entries:
        y[i] += v * x[j]
    return y


def matvec_t(cols, entries, y):
    x = [0.0] * cols
    for i, j, v in entries:
        x[j] += v * y[i]
    return x


def least_squares(stub, path):
    """Uploads a rectangular matrix and solves min ||A x - b|| for
    b = A 1 + a component outside range(A) (so the system is inconsistent),
    as least squares (method auto, least_squares set); checks in Python that the x received satisfies the
    normal equations: ||A^T r|| small against ||A||_F ||r||, the quantity
    Paige and Saunders' inconsistent-system rule bounds (ACM TOMS 8(1), 1982,
    section 6)."""
    rows, cols, entries = read_matrix_market(path)
    b = matvec(rows, entries, [1.0] * cols)
    b = [bi + (0.5 if i % 2 else -0.5) for i, bi in enumerate(b)]
    m = upload(stub, path, "python-lsq")
    if (m.rows, m.cols) != (rows, cols):
        fail("least-squares upload reply %dx%d, file %dx%d" % (m.rows, m.cols, rows, cols))
    req = pb.SolveRequest(matrix_id=m.id, rhs=[pb.VectorRef(data=pack(b))], least_squares=True,
                          progress=pb.ProgressPolicy(every_iterations=5))
    events, solution = collect(stub.Solve(req, timeout=120))
    result = events[-2].result
    if not result.converged:
        fail("least-squares solve did not converge: %s" % result)
    x = solution[0]
    if len(x) != cols:
        fail("least-squares solution has %d entries, want %d" % (len(x), cols))
    r = [bi - ai for bi, ai in zip(b, matvec(rows, entries, x))]
    g = matvec_t(cols, entries, r)
    anorm = math.sqrt(sum(v * v for _, _, v in entries))
    # The default atol is 1e-8; ||A||_F bounds the server's ||A|| estimate
    # from above, and a factor 10 covers the different summation order.
    ratio = norm(g) / (anorm * norm(r))
    if ratio > 1e-7:
        fail("least squares: ||A^T r|| / (||A||_F ||r||) = %g" % ratio)
    if abs(result.normal_residual_norm - norm(g)) > 1e-6 * anorm * norm(r):
        fail("least squares: server's ||A^T r|| %g, Python's %g" % (result.normal_residual_norm, norm(g)))
    return {"lsq_iterations": result.iterations, "lsq_normal_ratio": ratio,
            "lsq_method": [ev.accepted.method for ev in events if ev.WhichOneof("event") == "accepted"][0]}


def pack(x):
    return struct.pack("<%dd" % len(x), *x)


def unpack(b):
    return list(struct.unpack("<%dd" % (len(b) // 8), b))


def norm(x):
    return math.sqrt(sum(v * v for v in x))


def health(channel):
    # grpc.health.v1.Health/Check with an empty HealthCheckRequest; the
    # response's field 1 (status) is a varint: SERVING = 1. Encoded by hand
    # because Debian ships no grpc_health package for Python.
    check = channel.unary_unary("/grpc.health.v1.Health/Check",
                                request_serializer=lambda m: m,
                                response_deserializer=lambda b: b)
    resp = check(b"", timeout=10)
    if resp != b"\x08\x01":
        fail("health check answered %r, not SERVING" % resp)
    return "SERVING"


def upload(stub, path, name):
    def requests():
        yield pb.UploadMatrixRequest(metadata=pb.UploadMetadata(
            name=name, encoding=pb.MATRIX_MARKET))
        with open(path, "rb") as f:
            while True:
                chunk = f.read(CHUNK)
                if not chunk:
                    return
                yield pb.UploadMatrixRequest(chunk=chunk)
    return stub.UploadMatrix(requests(), timeout=60)


def collect(stream):
    events, solution = [], {}
    for ev in stream:
        kind = ev.WhichOneof("event")
        if kind == "solution":
            c = ev.solution
            part = solution.setdefault(c.rhs, [])
            if c.offset != len(part):
                fail("solution chunk at offset %d after %d entries" % (c.offset, len(part)))
            part.extend(unpack(c.data))
            continue
        events.append(ev)
    return events, solution


def main():
    if len(sys.argv) not in (3, 4):
        fail("usage: check.py ADDRESS MATRIX.mtx [RECTANGULAR.mtx]")
    addr, path = sys.argv[1], sys.argv[2]
    rows, cols, entries = read_matrix_market(path)
    b = matvec(rows, entries, [1.0] * cols)

    channel = grpc.insecure_channel(addr)
    stub = pbg.SolverStub(channel)
    seen = {"health": health(channel)}

    m = upload(stub, path, "python-upload")
    if (m.rows, m.cols) != (rows, cols):
        fail("upload reply %dx%d, file %dx%d" % (m.rows, m.cols, rows, cols))
    seen["matrix_id"], seen["nonzeros"] = m.id, m.nonzeros

    req = pb.SolveRequest(matrix_id=m.id, rhs=[pb.VectorRef(data=pack(b))],
                          preconditioner="jacobi", rtol=RTOL,
                          progress=pb.ProgressPolicy(every_iterations=10))
    events, solution = collect(stub.Solve(req, timeout=120))
    kinds = [ev.WhichOneof("event") for ev in events]
    if kinds[:3] != ["queued", "accepted", "progress"] or kinds[-2:] != ["result", "finished"]:
        fail("event order %s" % kinds)
    result = events[-2].result
    if not result.converged or result.status != "converged":
        fail("solve did not converge: %s" % result)
    x = solution[0]
    r = [bi - ai for bi, ai in zip(b, matvec(rows, entries, x))]
    rel = norm(r) / norm(b)
    # The stopping test on the true residual, rechecked here in Python; the
    # 1% slack covers the different order of summation.
    if rel > 1.01 * RTOL:
        fail("true relative residual %g > %g" % (rel, RTOL))
    seen.update(job_id=events[0].job_id, iterations=result.iterations,
                relative_residual=rel, progress_events=kinds.count("progress"))

    # Watching the finished job replays its history.
    replay, _ = collect(stub.Watch(pb.WatchRequest(job_id=events[0].job_id), timeout=60))
    if [ev.seq for ev in replay] != [ev.seq for ev in events]:
        fail("watch replay differs from the solve stream")
    if replay[-2].result != result:
        fail("watch replay's result differs")

    # A detached job: the stream ends after the queued event; follow it
    # with Watch, then download the kept solution.
    req.detach = True
    req.time_limit.CopyFrom(duration_pb2.Duration(seconds=60))
    first, _ = collect(stub.Solve(req, timeout=60))
    if [ev.WhichOneof("event") for ev in first] != ["queued"]:
        fail("detached solve sent %s" % first)
    job_id = first[0].job_id
    watched, _ = collect(stub.Watch(pb.WatchRequest(job_id=job_id), timeout=120))
    if watched[-1].finished.state != pb.DONE or watched[-1].finished.outcome != "converged":
        fail("detached job ended %s" % watched[-1].finished)
    chunks = list(stub.DownloadSolution(pb.DownloadSolutionRequest(job_id=job_id, rhs=0), timeout=60))
    x2 = []
    for c in chunks:
        x2.extend(unpack(c.data))
    if not chunks[-1].last or x2 != x:
        fail("downloaded solution differs from the streamed one")
    jobs = stub.ListJobs(pb.ListJobsRequest(), timeout=10).jobs
    if job_id not in [j.id for j in jobs]:
        fail("ListJobs lacks the detached job")
    seen["detached_job_id"] = job_id

    if len(sys.argv) == 4:
        seen.update(least_squares(stub, sys.argv[3]))
    print(json.dumps(seen))


if __name__ == "__main__":
    main()
