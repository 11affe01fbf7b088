package main

import (
	"context"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"github.com/residua/residua/client"
	"github.com/residua/residua/csrfile"
	"github.com/residua/residua/internal/atomicfile"
	"github.com/residua/residua/solve"
	"github.com/residua/residua/sparse"
	"github.com/residua/residua/sparse/stencil"
	"github.com/residua/residua/wire"
)

// crashMatrix is upload number k of the crash loop: the 3D Poisson matrix
// of a side between 8 and 40 (a file of 40 KB to 5 MB, so that kills land
// inside writes too), its values scaled so that every upload is a new
// matrix with its own id.
func crashMatrix(k int, side int) *sparse.CSR {
	a := stencil.Poisson3D(side)
	f := 1 + float64(k)/1024
	for i := range a.Val {
		a.Val[i] *= f
	}
	return a
}

// testCrashLoopUploads starts the real binary with --data, uploads
// matrices from several clients at once, and kills the server with SIGKILL
// at seeded random moments (during uploads, during the data folder's
// writes), restarting it each time. After every restart the folder must
// open cleanly (no file quarantined: an acknowledged upload is never torn,
// and an unacknowledged one leaves at most a temporary file, which start-up
// sweeps) and list every upload acknowledged so far; at the end every
// acknowledged matrix is read back from its file, every checksum and its id
// verified (csrfile.ReadMatrix), and equals what was sent, and no
// temporary file is left.
//
// The short form (CI) kills 20 times; RESIDUA_CRASH_KILLS sets another
// count (the long form) and RESIDUA_CRASH_SEED the seed.
func testCrashLoopUploads(t *testing.T, bin string) {
	kills, seed := 20, uint64(12)
	if v, err := strconv.Atoi(os.Getenv("RESIDUA_CRASH_KILLS")); err == nil && v > 0 {
		kills = v
	}
	if v, err := strconv.ParseUint(os.Getenv("RESIDUA_CRASH_SEED"), 10, 64); err == nil {
		seed = v
	}
	rng := rand.New(rand.NewPCG(seed, 7))
	dir := t.TempDir()
	data := filepath.Join(dir, "data")

	var mu sync.Mutex
	acked := map[string]int{} // id → upload number, for the final check
	sides := map[int]int{}    // upload number → side
	var ackedBytes int64
	next, torn := 0, 0
	start := time.Now()
	for round := 0; round <= kills; round++ {
		srv := startServer(t, bin, "--data", data)
		log := srv.log()
		if strings.Contains(log, "quarantined") {
			t.Fatalf("round %d: start-up quarantined a file:\n%s", round, log)
		}
		// A kill inside a write leaves its temporary file, which start-up
		// sweeps with this line.
		torn += strings.Count(log, "removed a partial write")
		c, err := client.Dial(context.Background(), srv.grpc)
		if err != nil {
			t.Fatal(err)
		}
		list, err := c.Matrices(context.Background())
		if err != nil {
			t.Fatalf("round %d: listing: %v", round, err)
		}
		have := map[string]bool{}
		for _, m := range list {
			have[m.GetId()] = true
		}
		mu.Lock()
		for id, k := range acked {
			if !have[id] {
				t.Fatalf("round %d: acknowledged upload %d (%s) is missing after the restart", round, k, id)
			}
		}
		mu.Unlock()
		if round == kills {
			// The last start: a solve on a stored matrix loads it from
			// its file and converges (b = A·1, so x = 1; checked here).
			for id, k := range acked {
				a := crashMatrix(k, sides[k])
				b := make([]float64, a.Rows)
				a.MulVec(b, onesVec(a.Cols))
				out, err := c.Solve(context.Background(), client.SolveRequest{MatrixID: id, B: [][]float64{b}}, nil)
				if err != nil || len(out.X) != 1 || maxErrorVsOnes(out.X[0]) > 1e-5 {
					t.Fatalf("solve on stored upload %d after the crashes: %v", k, err)
				}
				break
			}
			c.Close()
			srv.cmd.Process.Kill()
			<-srv.done
			break
		}
		ctx, cancel := context.WithCancel(context.Background())
		var wg sync.WaitGroup
		for range 3 {
			mu.Lock()
			plan := make([][2]int, 8)
			for i := range plan {
				plan[i] = [2]int{next, 8 + rng.IntN(33)}
				sides[next] = plan[i][1]
				next++
			}
			mu.Unlock()
			wg.Add(1)
			go func() {
				defer wg.Done()
				for _, p := range plan {
					a := crashMatrix(p[0], p[1])
					m, err := c.UploadCSR(ctx, a, "crash-"+strconv.Itoa(p[0]))
					if err != nil {
						return // the server was killed under this upload
					}
					mu.Lock()
					acked[m.GetId()] = p[0]
					ackedBytes += wire.CSRBytes(int64(a.Rows), int64(a.NNZ()))
					mu.Unlock()
				}
			}()
		}
		time.Sleep(time.Duration(5+rng.IntN(400)) * time.Millisecond)
		srv.cmd.Process.Kill() // SIGKILL: no shutdown of any kind
		<-srv.done
		cancel()
		wg.Wait()
		c.Close()
	}

	// Every acknowledged matrix is on disk, intact and equal to what was
	// sent: ReadMatrix checks each part's CRC and that the arrays hash to
	// the id, and the id is wire.MatrixID of the matrix uploaded.
	for id, k := range acked {
		a, h, err := csrfile.ReadMatrix(filepath.Join(data, "matrices", id+".csr"))
		if err != nil {
			t.Fatalf("upload %d: %v", k, err)
		}
		if want := wire.MatrixID(crashMatrix(k, sides[k])); h.ID != want || wire.MatrixID(a) != want {
			t.Fatalf("upload %d: stored id %s, sent %s", k, h.ID, want)
		}
	}
	ents, _ := os.ReadDir(filepath.Join(data, "matrices"))
	for _, e := range ents {
		if atomicfile.IsTemp(e.Name()) {
			t.Errorf("temporary file left after the last start: %s", e.Name())
		}
	}
	if q, _ := os.ReadDir(filepath.Join(data, "quarantine")); len(q) > 0 {
		t.Errorf("%d files quarantined", len(q))
	}
	if len(acked) == 0 {
		t.Fatal("no upload was acknowledged: the test did not exercise anything")
	}
	t.Logf("crash loop: %d kills survived, %d uploads acknowledged (%.1f MB of CSR arrays), %d kills inside a file write, %v",
		kills, len(acked), float64(ackedBytes)/1e6, torn, time.Since(start).Round(time.Millisecond))
}

// testCrashLoopJobs is the crash loop for jobs: detached solves (four
// right-hand sides each, checkpoints every 20 ms) are submitted while the
// server is killed with SIGKILL at seeded random moments and restarted.
// Every job whose id was acknowledged must reach an outcome after the
// last restart, and every converged right-hand side's downloaded solution
// must meet its tolerance on the true residual, recomputed here from the
// matrix (‖b − A·x‖ ≤ rtol·‖b‖, with a factor 2 for the rounding of the
// recomputation itself: common practice). The store must open cleanly
// every time and no temporary file may be left. RESIDUA_CRASH_KILLS and
// RESIDUA_CRASH_SEED as for testCrashLoopUploads.
func testCrashLoopJobs(t *testing.T, bin string) {
	kills, seed := 20, uint64(21)
	if v, err := strconv.Atoi(os.Getenv("RESIDUA_CRASH_KILLS")); err == nil && v > 0 {
		kills = v
	}
	if v, err := strconv.ParseUint(os.Getenv("RESIDUA_CRASH_SEED"), 10, 64); err == nil {
		seed = v
	}
	rng := rand.New(rand.NewPCG(seed, 9))
	data := filepath.Join(t.TempDir(), "data")
	args := []string{"--data", data, "--checkpoint-every", "20ms"}
	const rtol = 1e-9
	a := stencil.Poisson3D(30)
	rhs := make([][]float64, 4)
	for k := range rhs {
		rhs[k] = make([]float64, a.Rows)
		for i := range rhs[k] {
			rhs[k][i] = float64((i*(k+3))%11) - 5
		}
	}
	var jobs []string
	matrixID := ""
	resumes, torn := 0, 0 // from the logs: resumptions from a checkpoint, kills inside a write
	start := time.Now()
	for round := 0; round <= kills; round++ {
		srv := startServer(t, bin, args...)
		if log := srv.log(); strings.Contains(log, "quarantined") || strings.Contains(log, "could not run again") {
			t.Fatalf("round %d: start-up:\n%s", round, log)
		}
		c, err := client.Dial(context.Background(), srv.grpc)
		if err != nil {
			t.Fatal(err)
		}
		if matrixID == "" {
			m, err := c.UploadCSR(context.Background(), a, "block")
			if err != nil {
				t.Fatal(err)
			}
			matrixID = m.GetId()
		}
		if round == kills {
			// The last start: every acknowledged job reaches an outcome.
			for _, id := range jobs {
				ctx, cancel := context.WithTimeout(context.Background(), 90*time.Second)
				out, err := c.Watch(ctx, id, nil)
				cancel()
				if err != nil || out.State != "done" {
					t.Fatalf("job %s: %v, state %q\n%s", id, err, out.State, srv.log())
				}
				for k, res := range out.Results {
					if res.Status != "converged" {
						continue
					}
					x, err := c.DownloadSolution(context.Background(), id, k)
					if err != nil {
						t.Fatalf("job %s rhs %d: %v", id, k, err)
					}
					ax := make([]float64, a.Rows)
					a.MulVec(ax, x)
					var r, nb float64
					for i, bi := range rhs[k] {
						r += (bi - ax[i]) * (bi - ax[i])
						nb += bi * bi
					}
					if rel := math.Sqrt(r / nb); rel > 2*rtol {
						t.Errorf("job %s rhs %d: true relative residual %.3g > %g", id, k, rel, rtol)
					}
				}
			}
			c.Close()
			srv.cmd.Process.Kill()
			<-srv.done
			break
		}
		deadline := time.Now().Add(time.Duration(20+rng.IntN(600)) * time.Millisecond)
		for time.Now().Before(deadline) {
			ctx, cancel := context.WithDeadline(context.Background(), deadline)
			out, err := c.Solve(ctx, client.SolveRequest{MatrixID: matrixID, B: rhs, Detach: true,
				Request: solve.Request{Preconditioner: "none", RelTol: rtol}}, nil)
			cancel()
			if err != nil {
				break
			}
			jobs = append(jobs, out.JobID) // acknowledged: the id arrived
		}
		srv.cmd.Process.Kill()
		<-srv.done
		c.Close()
		log := srv.log()
		resumes += strings.Count(log, "job resumed")
		torn += strings.Count(log, "removed a partial write")
	}
	ents, _ := os.ReadDir(filepath.Join(data, "jobs"))
	for _, e := range ents {
		if atomicfile.IsTemp(e.Name()) {
			t.Errorf("temporary file left: %s", e.Name())
		}
	}
	if len(jobs) == 0 {
		t.Fatal("no job was acknowledged")
	}
	t.Logf("crash loop for jobs: %d kills survived, %d jobs acknowledged and finished (%d right-hand sides of %d unknowns each), %d resumptions from a checkpoint, %d kills inside a file write, %v",
		kills, len(jobs), 4*len(jobs), a.Rows, resumes, torn, time.Since(start).Round(time.Millisecond))
}

// testGracefulRestartUnderLoad: 16 clients solve (8 detached, 8 attached)
// while the server gets SIGTERM and is restarted. Every detached job
// finishes after the restart, converged; every attached one either
// finished before the stop or got a clear status (CANCELED or UNAVAILABLE
// with a message), and its record says how it ended.
func testGracefulRestartUnderLoad(t *testing.T, bin string) {
	data := filepath.Join(t.TempDir(), "data")
	args := []string{"--data", data, "--checkpoint-every", "50ms", "--shutdown-grace", "100ms"}
	a := stencil.Poisson3D(30)
	b := make([]float64, a.Rows)
	a.MulVec(b, onesVec(a.Cols))
	srv := startServer(t, bin, args...)
	c, err := client.Dial(context.Background(), srv.grpc)
	if err != nil {
		t.Fatal(err)
	}
	m, err := c.UploadCSR(context.Background(), a, "block")
	if err != nil {
		t.Fatal(err)
	}
	req := client.SolveRequest{MatrixID: m.GetId(), B: [][]float64{b, b, b}, Request: solve.Request{Preconditioner: "none", RelTol: 1e-10}}
	var mu sync.Mutex
	var detached, attached []string
	attachedErr := map[string]error{}
	refused := 0
	acks := make(chan struct{}, 16)
	var wg sync.WaitGroup
	for i := range 16 {
		wg.Add(1)
		go func() {
			defer wg.Done()
			r := req
			r.Detach = i%2 == 0
			once := sync.Once{}
			out, err := c.Solve(context.Background(), r, func(client.Event) { once.Do(func() { acks <- struct{}{} }) })
			once.Do(func() { acks <- struct{}{} })
			mu.Lock()
			defer mu.Unlock()
			if err != nil && (out == nil || out.JobID == "") {
				refused++ // refused before it had an id (the server was stopping)
			}
			switch {
			case r.Detach && err == nil:
				detached = append(detached, out.JobID)
			case !r.Detach && out != nil && out.JobID != "":
				attached = append(attached, out.JobID)
				attachedErr[out.JobID] = err
			}
		}()
	}
	// SIGTERM once every client has its job id (its first event), so that
	// the stop meets 16 accepted jobs, most of them queued or running.
	for range 16 {
		select {
		case <-acks:
		case <-time.After(60 * time.Second):
			t.Fatal("the clients did not all get a job id")
		}
	}
	srv.cmd.Process.Signal(syscall.SIGTERM)
	if err := <-srv.done; err != nil {
		t.Fatalf("graceful stop: %v\n%s", err, srv.log())
	}
	wg.Wait()
	c.Close()
	for id, err := range attachedErr {
		if code := status.Code(err); err != nil && code != codes.Canceled && code != codes.Unavailable {
			t.Errorf("attached job %s: %v", id, err)
		}
	}

	srv = startServer(t, bin, args...)
	c, err = client.Dial(context.Background(), srv.grpc)
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	for _, id := range detached {
		ctx, cancel := context.WithTimeout(context.Background(), 90*time.Second)
		out, err := c.Watch(ctx, id, nil)
		cancel()
		if err != nil || out.Outcome != solve.Converged {
			t.Errorf("detached job %s after the restart: %v, %v", id, out.Outcome, err)
		}
	}
	for _, id := range attached {
		j, err := c.Job(context.Background(), id)
		if err != nil || j.GetState().String() != "DONE" || (j.GetOutcome() != "converged" && j.GetError() == "") {
			t.Errorf("attached job %s after the restart: %v, %v", id, j, err)
		}
	}
	if len(detached)+len(attached)+refused != 16 {
		t.Errorf("%d detached, %d attached, %d refused: some client got no answer", len(detached), len(attached), refused)
	}
	t.Logf("graceful restart: %d detached jobs finished after it, %d attached jobs reported, %d requests refused while stopping",
		len(detached), len(attached), refused)
}

// TestDurableBinary runs the tests of the real binary's durability on one
// build of it: the crash loops, the graceful restart and the checkpoint
// of a local solve under SIGINT.
func TestDurableBinary(t *testing.T) {
	if testing.Short() {
		t.Skip("builds the binary and restarts it many times")
	}
	bin := buildBinary(t)
	t.Run("checkpoint-signal", func(t *testing.T) { testCheckpointSignal(t, bin) })
	t.Run("crash-loop-uploads", func(t *testing.T) { testCrashLoopUploads(t, bin) })
	t.Run("crash-loop-jobs", func(t *testing.T) { testCrashLoopJobs(t, bin) })
	t.Run("graceful-restart", func(t *testing.T) { testGracefulRestartUnderLoad(t, bin) })
}
