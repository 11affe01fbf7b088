package main

// The resident-memory half of the abuse suite of issue 15 (the in-process
// half is api/abuse_test.go): the real binary, driven as the issue's
// client drove it, with its peak resident memory read from /proc.

import (
	"bufio"
	"context"
	"fmt"
	"net/http"
	"os"
	"os/exec"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/mem"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/encoding/protowire"
	"google.golang.org/protobuf/proto"

	"github.com/residua/residua/client"
	pb "github.com/residua/residua/proto/residua/v1"
)

// peakRSS reads a process's peak resident set (VmHWM, proc(5)) in bytes.
func peakRSS(t *testing.T, pid int) int64 {
	t.Helper()
	f, err := os.Open(fmt.Sprintf("/proc/%d/status", pid))
	if err != nil {
		t.Skipf("no /proc to read resident memory from: %v", err)
	}
	defer f.Close()
	sc := bufio.NewScanner(f)
	for sc.Scan() {
		if rest, ok := strings.CutPrefix(sc.Text(), "VmHWM:"); ok {
			kb, err := strconv.ParseInt(strings.TrimSpace(strings.TrimSuffix(strings.TrimSpace(rest), "kB")), 10, 64)
			if err != nil {
				t.Fatal(err)
			}
			return kb << 10
		}
	}
	t.Fatal("no VmHWM line in /proc/PID/status")
	return 0
}

// hollowText is the 72-byte upload: a coordinate matrix of n rows
// with one entry.
func hollowText(n int, v int) string {
	return fmt.Sprintf("%%%%MatrixMarket matrix coordinate real general\n%d %d 1\n1 1 %d\n", n, n, v)
}

// rawBytes sends pre-encoded request bytes (see sendRefs).
type rawBytes struct{}

func (rawBytes) Name() string { return "proto" }
func (rawBytes) Marshal(v any) (mem.BufferSlice, error) {
	return mem.BufferSlice{mem.SliceBuffer(*v.(*[]byte))}, nil
}
func (rawBytes) Unmarshal(data mem.BufferSlice, v any) error {
	return proto.Unmarshal(data.Materialize(), v.(proto.Message))
}

// TestAbuseBinary: the bounds hold in the real server's resident
// memory, and its HTTP side asks for the token. 22 uploads of the 72-byte matrix took the server from 27 MB to
// 8.6 GB; with mostly empty matrices allowed, each is charged against the
// budget before it is allocated; 32 requests of a million empty
// right-hand-side references at once took 557 MB. Our bound for all of
// it: 256 MiB of peak resident memory (the idle server takes about 30 MB;
// the 32 requests' 2 MB bodies, held by the transport and the codec while
// they are counted, some 130 MB more at most).
func TestAbuseBinary(t *testing.T) {
	if testing.Short() {
		t.Skip("builds and runs the binary")
	}
	bin := buildBinary(t)
	ctx, cancel := context.WithTimeout(context.Background(), 60*time.Second)
	defer cancel()
	const bound = 256 << 20

	t.Run("refused", func(t *testing.T) {
		srv := startServer(t, bin, "--memory", "1GiB")
		c, err := client.Dial(ctx, srv.grpc)
		if err != nil {
			t.Fatal(err)
		}
		defer c.Close()
		for i := range 22 {
			_, err := c.UploadReader(ctx, strings.NewReader(hollowText(50_000_000, i+1)), fmt.Sprintf("hollow-%d", i), nil)
			if status.Code(err) != codes.InvalidArgument {
				t.Fatalf("upload %d: %v, want INVALID_ARGUMENT", i, err)
			}
		}
		// A million empty references, 2 MB each request, 32 at once.
		m, err := c.UploadReader(ctx, strings.NewReader(hollowText(1, 1)), "one", nil)
		if err != nil {
			t.Fatal(err)
		}
		msg := protowire.AppendTag(nil, 1, protowire.BytesType)
		msg = protowire.AppendString(msg, m.GetId())
		for range 1_000_000 {
			msg = protowire.AppendTag(msg, 2, protowire.BytesType) // SolveRequest.rhs
			msg = protowire.AppendVarint(msg, 0)
		}
		var wg sync.WaitGroup
		errs := make([]error, 32)
		for i := range errs {
			wg.Add(1)
			go func() {
				defer wg.Done()
				s, err := c.Conn().NewStream(ctx, &grpc.StreamDesc{ServerStreams: true}, pb.Solver_Solve_FullMethodName, grpc.ForceCodecV2(rawBytes{}))
				if err != nil {
					errs[i] = err
					return
				}
				if err := s.SendMsg(&msg); err != nil {
					errs[i] = err
					return
				}
				s.CloseSend()
				errs[i] = s.RecvMsg(new(pb.JobEvent))
			}()
		}
		wg.Wait()
		for i, err := range errs {
			if status.Code(err) != codes.ResourceExhausted {
				t.Fatalf("request %d of a million references: %v, want RESOURCE_EXHAUSTED", i, err)
			}
		}
		if rss := peakRSS(t, srv.cmd.Process.Pid); rss > bound {
			t.Errorf("peak resident memory %d MiB, over our bound of %d MiB", rss>>20, bound>>20)
		} else {
			t.Logf("peak resident memory %d MiB", rss>>20)
		}
	})

	t.Run("charged", func(t *testing.T) {
		// Allowed, but 50,000,001 row pointers (381.5 MiB) do not fit a
		// 256 MiB budget: each upload is refused at the size line,
		// before the row pointers exist.
		srv := startServer(t, bin, "--memory", "256MiB", "--allow-mostly-empty")
		c, err := client.Dial(ctx, srv.grpc)
		if err != nil {
			t.Fatal(err)
		}
		defer c.Close()
		for i := range 22 {
			_, err := c.UploadReader(ctx, strings.NewReader(hollowText(50_000_000, i+1)), fmt.Sprintf("hollow-%d", i), nil)
			if status.Code(err) != codes.ResourceExhausted {
				t.Fatalf("upload %d: %v, want RESOURCE_EXHAUSTED", i, err)
			}
		}
		if rss := peakRSS(t, srv.cmd.Process.Pid); rss > bound {
			t.Errorf("peak resident memory %d MiB, over our bound of %d MiB", rss>>20, bound>>20)
		} else {
			t.Logf("peak resident memory %d MiB", rss>>20)
		}
	})

	t.Run("http-token", func(t *testing.T) {
		// With --token-file the HTTP side asks for the token too; health
		// (gRPC) stays open, and --metrics-listen serves /metrics alone,
		// open, for a scraper.
		token := t.TempDir() + "/token"
		os.WriteFile(token, []byte("s3cret-for-the-test\n"), 0o600)
		srv := startServer(t, bin, "--token-file", token, "--metrics-listen", "127.0.0.1:0")
		var metricsAddr string
		for _, line := range strings.Split(srv.log(), "\n") {
			if v, ok := strings.CutPrefix(line, "residua: metrics on "); ok {
				metricsAddr = v
			}
		}
		if metricsAddr == "" {
			t.Fatalf("no metrics address printed:\n%s", srv.log())
		}
		get := func(url, tok string) int {
			t.Helper()
			req, _ := http.NewRequest(http.MethodGet, url, nil)
			if tok != "" {
				req.Header.Set("Authorization", "Bearer "+tok)
			}
			res, err := http.DefaultClient.Do(req)
			if err != nil {
				t.Fatal(err)
			}
			res.Body.Close()
			return res.StatusCode
		}
		for _, p := range []string{"/api/jobs", "/api/jobs/j0/history", "/metrics"} {
			if code := get("http://"+srv.web+p, ""); code != http.StatusUnauthorized {
				t.Errorf("GET %s without the token: %d, want 401", p, code)
			}
			if code := get("http://"+srv.web+p, "s3cret-for-the-test"); code == http.StatusUnauthorized {
				t.Errorf("GET %s with the token: 401", p)
			}
		}
		if code := get("http://"+srv.web+"/", ""); code != http.StatusOK {
			t.Errorf("GET / (the page shell): %d, want 200", code)
		}
		if code := get(metricsAddr, ""); code != http.StatusOK {
			t.Errorf("GET %s (the scraper's listener): %d, want 200", metricsAddr, code)
		}
		c, err := client.Dial(ctx, srv.grpc)
		if err != nil {
			t.Fatal(err)
		}
		defer c.Close()
		if st, err := c.Health(ctx); err != nil || st.String() != "SERVING" {
			t.Errorf("health without the token: %v %v, want SERVING", st, err)
		}
	})

	t.Run("inspect", func(t *testing.T) {
		// The CLI's share: inspect of the 76-byte file used to build
		// 1.6 GB of row pointers; it is refused at the size line now.
		path := t.TempDir() + "/hollow.mtx"
		if err := os.WriteFile(path, []byte(hollowText(200_000_000, 1)), 0o644); err != nil {
			t.Fatal(err)
		}
		cmd := exec.Command(bin, "inspect", path)
		out, err := cmd.CombinedOutput()
		if cmd.ProcessState == nil || cmd.ProcessState.ExitCode() != exitUsage || !strings.Contains(string(out), "--allow-mostly-empty") {
			t.Fatalf("inspect of a mostly empty matrix: %v, %s", err, out)
		}
		if ru, ok := cmd.ProcessState.SysUsage().(*syscall.Rusage); ok && ru.Maxrss<<10 > bound {
			// getrusage(2): ru_maxrss is in kilobytes on Linux.
			t.Errorf("inspect's peak resident memory %d MiB", ru.Maxrss>>10)
		}
	})
}
