// heat_plate: the template for offloading a simulation code's linear solves
// to a residua server from C++.
//
// The scenario (made up for this example): steady heat conduction in a square
// plate held at 0 °C on its edges, discretised with the 5-point finite-
// difference stencil on an N×N grid of interior nodes. The matrix is the
// standard SPD Laplacian (Saad, Iterative Methods for Sparse Linear Systems,
// 2nd ed., §2.2). Two load cases share it: a uniform heat source, and a hot
// spot at the centre. A simulation code does the same with its own matrix:
// build CSR once, upload it once, solve many right-hand sides.
//
//   heat_plate HOST:PORT [N]        (default N = 64; RESIDUA_TOKEN_FILE for a token)
//
// It prints progress while the server iterates, the server's one-line
// verdict per load case, and then checks each solution itself by its true
// residual. Exit status 0 when both checks pass, 1 otherwise.
#include <algorithm>
#include <bit>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <fstream>
#include <string>
#include <vector>

#include <grpcpp/grpcpp.h>
#include <openssl/evp.h>

#include "residua/v1/residua.grpc.pb.h"

namespace pb = residua::v1;

// The wire is little-endian (residua.proto, Conventions); on a little-endian
// machine the arrays can be sent as they lie in memory.
static_assert(std::endian::native == std::endian::little, "this example sends arrays as they are in memory");

// A matrix in compressed sparse row form, the layout of the CSR_RAW upload:
// row pointers as int64, column indices as int32 (0-based, increasing within
// each row), values as float64.
struct CSR {
    int64_t rows = 0, cols = 0;
    std::vector<int64_t> rowptr;
    std::vector<int32_t> colidx;
    std::vector<double> val;
};

// The 5-point Laplacian on an n×n grid, unknown (i, j) at row i·n + j. Each
// row lists its neighbours in increasing column order, as CSR_RAW requires.
static CSR laplacian(int n) {
    CSR a;
    a.rows = a.cols = int64_t(n) * n;
    a.rowptr.reserve(a.rows + 1);
    a.rowptr.push_back(0);
    for (int i = 0; i < n; i++) {
        for (int j = 0; j < n; j++) {
            auto add = [&](int ii, int jj, double v) {
                a.colidx.push_back(ii * n + jj);
                a.val.push_back(v);
            };
            if (i > 0) add(i - 1, j, -1);
            if (j > 0) add(i, j - 1, -1);
            add(i, j, 4);
            if (j < n - 1) add(i, j + 1, -1);
            if (i < n - 1) add(i + 1, j, -1);
            a.rowptr.push_back(int64_t(a.val.size()));
        }
    }
    return a;
}

// y = A·x, to check the server's answer with nothing but our own matrix.
static std::vector<double> multiply(const CSR& a, const std::vector<double>& x) {
    std::vector<double> y(a.rows, 0.0);
    for (int64_t i = 0; i < a.rows; i++)
        for (int64_t k = a.rowptr[i]; k < a.rowptr[i + 1]; k++) y[i] += a.val[k] * x[a.colidx[k]];
    return y;
}

static double norm(const std::vector<double>& v) {
    double s = 0;
    for (double e : v) s += e * e;
    return std::sqrt(s);
}

// SHA-256 as lowercase hex, fed piece by piece: the upload declares the sum of
// what it sends, and the last chunk of each solution carries the sum of the
// whole vector, which we check (OpenSSL's libcrypto, which gRPC links anyway).
struct Sha256 {
    EVP_MD_CTX* ctx = EVP_MD_CTX_new();
    Sha256() { EVP_DigestInit_ex(ctx, EVP_sha256(), nullptr); }
    ~Sha256() { EVP_MD_CTX_free(ctx); }
    void add(const void* p, size_t n) { EVP_DigestUpdate(ctx, p, n); }
    std::string hex() {
        unsigned char d[32];
        EVP_DigestFinal_ex(ctx, d, nullptr);
        char out[65];
        for (int i = 0; i < 32; i++) std::snprintf(out + 2 * i, 3, "%02x", d[i]);
        return std::string(out, 64);
    }
};

// Vectors travel as packed little-endian float64 bytes (Conventions).
static std::string pack(const std::vector<double>& v) {
    return std::string(reinterpret_cast<const char*>(v.data()), v.size() * sizeof(double));
}

// Uploads a in the CSR_RAW encoding: one metadata message with the sizes,
// then the three arrays back to back in chunks of 1 MiB (the server reads
// their concatenation, so a chunk may end anywhere). Returns the matrix id.
static std::string upload(pb::Solver::Stub& stub, grpc::ClientContext& ctx, const CSR& a) {
    pb::Matrix reply;
    auto stream = stub.UploadMatrix(&ctx, &reply);
    pb::UploadMatrixRequest msg;
    auto* meta = msg.mutable_metadata();
    meta->set_name("heat plate");
    meta->set_encoding(pb::CSR_RAW);
    meta->set_rows(a.rows);
    meta->set_cols(a.cols);
    meta->set_nonzeros(int64_t(a.val.size()));
    meta->set_total_bytes(8 * (a.rows + 1) + 12 * int64_t(a.val.size()));
    Sha256 sum;  // the server refuses the upload if what arrives differs
    sum.add(a.rowptr.data(), a.rowptr.size() * sizeof(int64_t));
    sum.add(a.colidx.data(), a.colidx.size() * sizeof(int32_t));
    sum.add(a.val.data(), a.val.size() * sizeof(double));
    meta->set_expected_sha256(sum.hex());
    bool ok = stream->Write(msg);
    const size_t chunk = 1 << 20;
    std::string pending;
    auto send = [&](const void* p, size_t n) {
        const char* c = static_cast<const char*>(p);
        while (ok && n > 0) {
            size_t take = std::min(n, chunk - pending.size());
            pending.append(c, take);
            c += take, n -= take;
            if (pending.size() == chunk) {
                msg.set_chunk(pending);
                ok = stream->Write(msg);
                pending.clear();
            }
        }
    };
    send(a.rowptr.data(), a.rowptr.size() * sizeof(int64_t));
    send(a.colidx.data(), a.colidx.size() * sizeof(int32_t));
    send(a.val.data(), a.val.size() * sizeof(double));
    if (ok && !pending.empty()) {
        msg.set_chunk(pending);
        stream->Write(msg);
    }
    stream->WritesDone();
    grpc::Status st = stream->Finish();
    if (!st.ok()) {
        std::fprintf(stderr, "heat_plate: upload refused: %s\n", st.error_message().c_str());
        std::exit(1);
    }
    std::printf("uploaded %lld×%lld, %lld entries, as matrix %s (%s)\n", (long long)reply.rows(),
                (long long)reply.cols(), (long long)reply.nonzeros(), reply.id().c_str(), reply.symmetry().c_str());
    return reply.id();
}

int main(int argc, char** argv) {
    if (argc < 2 || argc > 3) {
        std::fprintf(stderr, "usage: heat_plate HOST:PORT [N]\n");
        return 2;
    }
    const int n = argc == 3 ? std::atoi(argv[2]) : 64;
    if (n < 2 || n > 2000) {
        std::fprintf(stderr, "heat_plate: N must be in [2, 2000]\n");
        return 2;
    }
    const double rtol = 1e-10;

    // The bearer token, when the server wants one (residua serve --token-file).
    std::string token;
    if (const char* f = std::getenv("RESIDUA_TOKEN_FILE")) {
        std::ifstream in(f);
        std::getline(in, token);
    }
    auto with_token = [&](grpc::ClientContext& ctx) {
        if (!token.empty()) ctx.AddMetadata("authorization", "Bearer " + token);
    };

    auto channel = grpc::CreateChannel(argv[1], grpc::InsecureChannelCredentials());
    auto stub = pb::Solver::NewStub(channel);

    CSR a = laplacian(n);
    grpc::ClientContext upload_ctx;
    with_token(upload_ctx);
    const std::string id = upload(*stub, upload_ctx, a);

    // Two load cases: a uniform source, and a hot spot at the centre node.
    std::vector<std::vector<double>> b(2, std::vector<double>(a.rows, 0.0));
    for (auto& e : b[0]) e = 1.0;
    b[1][(n / 2) * n + n / 2] = 100.0;

    // One job solves both right-hand sides with one preconditioner set-up.
    // Vectors this short travel inline; past about 2 MiB a code would store
    // them first with UploadVector and refer to them by id.
    pb::SolveRequest req;
    req.set_matrix_id(id);
    for (const auto& v : b) req.add_rhs()->set_data(pack(v));
    req.set_method("cg");
    req.set_preconditioner("ic0");
    req.set_rtol(rtol);
    req.mutable_progress()->set_every_iterations(10);

    grpc::ClientContext ctx;
    with_token(ctx);
    auto stream = stub->Solve(&ctx, req);
    std::vector<std::vector<double>> x(b.size());
    std::vector<std::string> status(b.size());
    pb::JobEvent ev;
    while (stream->Read(&ev)) {
        switch (ev.event_case()) {
        case pb::JobEvent::kAccepted:
            std::printf("job %s: %s with %s (%s)\n", ev.job_id().c_str(), ev.accepted().method().c_str(),
                        ev.accepted().preconditioner().c_str(), ev.accepted().preconditioner_reason().c_str());
            break;
        case pb::JobEvent::kProgress:
            std::printf("  load case %d  iteration %4lld  relative residual %.3e\n", ev.progress().rhs(),
                        (long long)ev.progress().iteration(), ev.progress().relative_residual());
            break;
        case pb::JobEvent::kResult:
            if (ev.result().rhs() >= 0 && size_t(ev.result().rhs()) < status.size())
                status[ev.result().rhs()] = ev.result().status();
            std::printf("load case %d: %s\n", ev.result().rhs(), ev.result().headline().c_str());
            break;
        case pb::JobEvent::kSolution: {
            // Chunks arrive in order; the last carries the total length.
            const auto& c = ev.solution();
            if (c.rhs() < 0 || size_t(c.rhs()) >= x.size() || c.offset() != int64_t(x[c.rhs()].size())) {
                std::fprintf(stderr, "heat_plate: solution chunk out of order\n");
                return 1;
            }
            auto& xs = x[c.rhs()];
            size_t k = c.data().size() / sizeof(double);
            xs.resize(xs.size() + k);
            std::memcpy(xs.data() + c.offset(), c.data().data(), k * sizeof(double));
            if (c.last()) {
                Sha256 got;
                got.add(xs.data(), xs.size() * sizeof(double));
                if (int64_t(xs.size()) != c.length() || got.hex() != c.sha256()) {
                    std::fprintf(stderr, "heat_plate: solution %d arrived altered or short\n", c.rhs());
                    return 1;
                }
            }
            break;
        }
        case pb::JobEvent::kFinished:
            std::printf("job finished: %s\n", ev.finished().outcome().c_str());
            break;
        default:
            break;
        }
    }
    grpc::Status st = stream->Finish();
    if (!st.ok()) {
        std::fprintf(stderr, "heat_plate: solve failed: %s\n", st.error_message().c_str());
        return 1;
    }

    // Trust, but verify: the true residual ‖b − A·x‖/‖b‖ from our own matrix.
    bool all_ok = true;
    for (size_t r = 0; r < b.size(); r++) {
        if (x[r].size() != size_t(a.rows)) {
            std::printf("load case %zu: solution has %zu of %lld entries\n", r, x[r].size(), (long long)a.rows);
            all_ok = false;
            continue;
        }
        std::vector<double> ax = multiply(a, x[r]);
        for (int64_t i = 0; i < a.rows; i++) ax[i] = b[r][i] - ax[i];
        double rel = norm(ax) / norm(b[r]);
        // 1% slack: our sum runs in another order than the server's.
        bool ok = status[r] == "converged" && rel <= 1.01 * rtol;
        std::printf("load case %zu: residual check %s: ‖b − A·x‖/‖b‖ = %.3e (tolerance %.1e), centre temperature %.6g\n",
                    r, ok ? "passed" : "FAILED", rel, rtol, x[r][(n / 2) * n + n / 2]);
        all_ok = all_ok && ok;
    }
    return all_ok ? 0 : 1;
}
