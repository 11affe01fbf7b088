package web

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"log/slog"
	"net"
	"net/http"
	"net/http/httptest"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/chromedp/chromedp"

	"github.com/residua/residua/api"
	"github.com/residua/residua/client"
	"github.com/residua/residua/internal/shared"
	"github.com/residua/residua/metrics"
	"github.com/residua/residua/solve"
	"github.com/residua/residua/sparse/stencil"
)

// chromium is Debian's browser package, which .ci/run installs.
const chromium = "/usr/bin/chromium"

// TestBrowser opens the page in a real headless browser against the real
// gRPC service (issue 5, section 5): a slow solve (jump3d on a 60³ grid, no
// preconditioner, relative tolerance 1e-14) runs while the page is open,
// and a small solve has already converged. It waits until the running
// job's chart has been redrawn at least twice, checks the states in words
// and a non-empty curve, saves screenshots at a phone's width and at a
// desktop's ($RESIDUA_ARTIFACTS, or the test's temporary folder), then
// cancels the slow job and checks the page says so.
func TestBrowser(t *testing.T) {
	if _, err := os.Stat(chromium); err != nil {
		shared.Skip(t, "%s is missing (Debian package chromium): the browser test of the watch page", chromium)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 55*time.Second)
	defer cancel()
	start := time.Now()
	phase := func(what string) { t.Logf("%5.1fs %s", time.Since(start).Seconds(), what) }

	// The service, on a loopback port, counting into the metrics the page
	// serves.
	m := metrics.New()
	srv, err := api.NewServer(api.Config{Logger: slog.New(slog.NewTextHandler(io.Discard, nil)), MaxConcurrentSolves: 2, Observer: m})
	if err != nil {
		t.Fatal(err)
	}
	lis, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	srvCtx, stopSrv := context.WithCancel(context.Background())
	srvDone := make(chan error, 1)
	go func() { srvDone <- srv.Serve(srvCtx, lis) }()
	defer func() {
		stopSrv()
		<-srvDone
	}()
	cl, err := client.Dial(ctx, lis.Addr().String())
	if err != nil {
		t.Fatal(err)
	}
	defer cl.Close()

	// A small system that converges at once, then the slow one.
	small := stencil.Poisson2D(24)
	ms, err := cl.UploadCSR(ctx, small, "poisson2d-24")
	if err != nil {
		t.Fatal(err)
	}
	if _, err := cl.Solve(ctx, client.SolveRequest{MatrixID: ms.GetId(), B: [][]float64{stencil.Ones(small)}, ProgressEvery: 1, Request: solve.Request{Preconditioner: "jacobi"}}, nil); err != nil {
		t.Fatal(err)
	}
	slow := stencil.Jump3D(60, stencil.DefaultContrast)
	mj, err := cl.UploadCSR(ctx, slow, "jump3d-60")
	if err != nil {
		t.Fatal(err)
	}
	out, err := cl.Solve(ctx, client.SolveRequest{MatrixID: mj.GetId(), B: [][]float64{stencil.Ones(slow)}, Detach: true, ProgressInterval: 100 * time.Millisecond, Request: solve.Request{Preconditioner: "none", RelTol: 1e-14}}, nil)
	if err != nil {
		t.Fatal(err)
	}
	slowID := out.JobID
	phase("solves started")
	defer cl.Cancel(context.Background(), slowID)

	// The page asks for a token (issue 15, finding 4): the browser signs
	// in through the page's form, and everything after it (the event
	// stream, the charts) rides on the session cookie.
	const token = "browser-test-token"
	page := New(FromRegistry(srv.Registry()), Options{Metrics: m, Token: []byte(token)})
	defer page.Close()
	hs := httptest.NewServer(page)
	defer hs.Close()
	if _, code := getStatus(t, hs.URL+"/api/jobs", ""); code != http.StatusUnauthorized {
		t.Errorf("/api/jobs without the token: %d, want 401", code)
	}

	alloc, stopAlloc := chromedp.NewExecAllocator(ctx,
		chromedp.ExecPath(chromium),
		chromedp.Headless,
		chromedp.NoSandbox,
		chromedp.DisableGPU,
		chromedp.NoFirstRun,
		chromedp.Flag("disable-background-networking", true),
		chromedp.Flag("disable-component-update", true),
		chromedp.Flag("disable-sync", true),
		chromedp.Flag("no-default-browser-check", true),
		chromedp.UserDataDir(t.TempDir()),
		chromedp.WindowSize(412, 915), // a phone's width, in CSS pixels
	)
	defer stopAlloc()
	bctx, stopBrowser := chromedp.NewContext(alloc, chromedp.WithLogf(t.Logf))
	defer stopBrowser()

	phase("browser starting")
	card := fmt.Sprintf("document.getElementById('job-%s')", slowID)
	if err := chromedp.Do(bctx, chromedp.Navigate(hs.URL)); err != nil {
		t.Fatal(err)
	}
	if _, err := chromedp.Run(bctx, chromedp.Poll[bool](`!document.getElementById('signin').hidden`,
		chromedp.WithPollingInterval(100*time.Millisecond), chromedp.WithPollingTimeout(10*time.Second))); err != nil {
		t.Fatalf("the page did not ask for the token: %v", err)
	}
	if err := chromedp.Do(bctx, chromedp.SendKeys("#token", token)); err != nil {
		t.Fatal(err)
	}
	if err := chromedp.Do(bctx, chromedp.Click("#signin button")); err != nil {
		t.Fatal(err)
	}
	phase("signed in")
	// The chart counts its redraws in data-updates: the first drawing and
	// at least two updates.
	if _, err := chromedp.Run(bctx, chromedp.Poll[bool](card+` && Number(`+card+`.dataset.updates) >= 3`,
		chromedp.WithPollingInterval(100*time.Millisecond), chromedp.WithPollingTimeout(25*time.Second))); err != nil {
		t.Fatalf("the running job's chart was not redrawn twice: %v", err)
	}
	type cardState struct {
		State, Iteration, Residual string
		CurvePoints                int
	}
	// The curve is the SVG path stroked in the chart package's first
	// series colour; its points are its M and L commands.
	read := func(id string) cardState {
		t.Helper()
		c, err := chromedp.Run(bctx, chromedp.Evaluate[cardState](fmt.Sprintf(`(() => {
			const li = document.getElementById('job-%s');
			const curve = [...li.querySelectorAll('.chart svg path')]
				.filter(p => (p.getAttribute('style') || '').toUpperCase().includes('STROKE:#1D4E89'));
			return {
				State: li.querySelector('.state').textContent,
				Iteration: li.querySelector('.iteration').textContent,
				Residual: li.querySelector('.residual').textContent,
				CurvePoints: Math.max(0, ...curve.map(p => ((p.getAttribute('d') || '').match(/[ML]/g) || []).length)),
			};
		})()`, id)))
		if err != nil {
			t.Fatal(err)
		}
		return c
	}
	phase("chart redrawn twice")
	running := read(slowID)
	if running.State != "running" || running.CurvePoints < 3 || running.Iteration == "—" {
		t.Errorf("running job's card: %+v", running)
	}
	jobs := srv.Registry().Jobs()
	smallID := jobs[len(jobs)-1].GetId()
	// Jacobi-CG on the 24×24 Poisson matrix takes 46 iterations to 1e-8,
	// and the page has them all.
	done := read(smallID)
	if done.State != "converged" || done.CurvePoints != 47 {
		t.Errorf("converged job's card: %+v", done)
	}
	// What a person reads on the card is what the job's JSON says: the
	// iteration and the relative residual in the page's formats (the
	// JavaScript Number's toExponential(2), which for these values is Go's
	// %.2e), and the outcome as the state.
	var js Job
	body, _ := getBodyAuth(t, hs.URL+"/api/jobs/"+smallID, token)
	if err := json.Unmarshal([]byte(body), &js); err != nil {
		t.Fatal(err)
	}
	wantRes := fmt.Sprintf("%.2e", float64(*js.RelResidual))
	wantRes = strings.Replace(strings.Replace(wantRes, "e-0", "e-", 1), "e+0", "e+", 1)
	if done.Iteration != fmt.Sprint(js.Iteration) || !strings.HasPrefix(done.Residual, wantRes+" ") || done.State != js.StateText || js.Iteration != 46 {
		t.Errorf("the card reads iteration %q, residual %q, state %q; the JSON says %d, %s, %q",
			done.Iteration, done.Residual, done.State, js.Iteration, wantRes, js.StateText)
	}

	dir := os.Getenv("RESIDUA_ARTIFACTS")
	if dir == "" {
		dir = t.TempDir()
	} else if err := os.MkdirAll(dir, 0o755); err != nil {
		t.Fatal(err)
	}
	shot := func(name string) {
		t.Helper()
		png, err := chromedp.Run(bctx, chromedp.FullScreenshot(100))
		if err != nil {
			t.Fatal(err)
		}
		path := filepath.Join(dir, name)
		if err := os.WriteFile(path, png, 0o644); err != nil {
			t.Fatal(err)
		}
		t.Logf("screenshot: %s", path)
	}
	shot("watch-page-phone.png")
	if err := chromedp.Do(bctx, chromedp.EmulateViewport(1200, 900)); err != nil {
		t.Fatal(err)
	}
	time.Sleep(600 * time.Millisecond) // one push interval, for a fresh frame
	shot("watch-page-desktop.png")

	phase("screenshots taken")
	// Cancelling the slow job: the page shows the final state.
	if _, err := cl.Cancel(ctx, slowID); err != nil {
		t.Fatal(err)
	}
	if _, err := chromedp.Run(bctx, chromedp.Poll[bool](card+`.querySelector('.state').textContent === 'cancelled'`,
		chromedp.WithPollingInterval(100*time.Millisecond), chromedp.WithPollingTimeout(10*time.Second))); err != nil {
		t.Fatalf("the cancelled job's card never said so: %+v (%v)", read(slowID), err)
	}

	phase("cancellation shown")
	// /metrics, parsed with the Prometheus client library's text parser,
	// has counted both jobs from the registry: one converged, one
	// cancelled, and the iterations of both.
	body, _ = getBodyAuth(t, hs.URL+"/metrics", token)
	got := parseMetrics(t, body)
	if got["residua_solves_started_total"] != 2 || got[`residua_solves_finished_total{outcome="converged"}`] != 1 ||
		got[`residua_solves_finished_total{outcome="cancelled"}`] != 1 || got["residua_iterations_total"] < 46 ||
		got["residua_solve_duration_seconds_count"] != 2 {
		t.Errorf("metrics after the solves: %v", got)
	}
}

func getBody(t *testing.T, url string) (string, http.Header) {
	t.Helper()
	res, err := http.Get(url)
	if err != nil {
		t.Fatal(err)
	}
	defer res.Body.Close()
	b, _ := io.ReadAll(res.Body)
	return string(b), res.Header
}

// getBodyAuth is getBody with a bearer token.
func getBodyAuth(t *testing.T, url, token string) (string, http.Header) {
	t.Helper()
	body, code := getStatus(t, url, token)
	if code != http.StatusOK {
		t.Fatalf("GET %s: %d %s", url, code, body)
	}
	return body, nil
}

// getStatus gets url, with a bearer token unless it is empty, and returns
// the body and the status code.
func getStatus(t *testing.T, url, token string) (string, int) {
	t.Helper()
	req, err := http.NewRequest(http.MethodGet, url, nil)
	if err != nil {
		t.Fatal(err)
	}
	if token != "" {
		req.Header.Set("Authorization", "Bearer "+token)
	}
	res, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer res.Body.Close()
	b, _ := io.ReadAll(res.Body)
	return string(b), res.StatusCode
}
