package main

// The resident-memory half of the abuse suite of issue 15 (the in-process
// half is api/abuse_test.go): the real binary, driven as the issue's
// client drove it, with its peak resident memory read from /proc.

import (
	"bufio"
	"context"
	"fmt"
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

// TestAbuseResidentMemory: the bounds hold in the real server's resident
// memory. 22 uploads of the 72-byte matrix took the server from 27 MB to
// 8.6 GB; with mostly empty matrices allowed, each is charged against the
// budget before it is allocated; 32 requests of a million empty
// right-hand-side references at once took 557 MB. Our bound for all of
// it: 256 MiB of peak resident memory (the idle server takes about 30 MB;
// the 32 requests' 2 MB bodies, held by the transport and the codec while
// they are counted, some 130 MB more at most).
func TestAbuseResidentMemory(t *testing.T) {
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
