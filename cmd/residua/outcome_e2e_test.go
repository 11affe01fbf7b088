package main

import (
	"encoding/json"
	"io"
	"net/http"
	"path/filepath"
	"reflect"
	"sort"
	"strings"
	"testing"
)

// perRun are the summary keys that differ from one run of the same solve to
// another by design: times, and what says where and how it ran.
var perRun = map[string]bool{
	"read_seconds": true, "upload_seconds": true, "setup_seconds": true, "solve_seconds": true,
	"seconds_per_iteration": true, "matrix": true, "rhs": true, "server": true, "job_id": true,
	"matrix_id": true, "matrix_uploaded": true, "preconditioner_from_cache": true, "solution_file": true,
	"history_file": true, "plot_file": true, "solution_note": true, "error_vs_ones": true,
}

// summaryKeys decodes one JSON summary into its keys and values.
func summaryKeys(t *testing.T, what, js string) map[string]any {
	t.Helper()
	var m map[string]any
	if err := json.Unmarshal([]byte(js), &m); err != nil {
		t.Fatalf("%s: not a JSON summary: %v\n%s", what, err, js)
	}
	return m
}

// sameSummaries checks that each summary has the reference's keys, less
// the per-run ones, with the same values: the numbers are the same bits
// (JSON writes every float in its shortest round-trip form), since every
// front end runs the same solve through the same code.
func sameSummaries(t *testing.T, ref map[string]any, others map[string]map[string]any) {
	t.Helper()
	var keys []string
	for k := range ref {
		if !perRun[k] {
			keys = append(keys, k)
		}
	}
	sort.Strings(keys)
	for name, o := range others {
		for _, k := range keys {
			if !reflect.DeepEqual(o[k], ref[k]) {
				t.Errorf("%s: %s = %v, the local solve's %v", name, k, o[k], ref[k])
			}
		}
		for k := range o {
			if _, ok := ref[k]; !ok && !perRun[k] {
				t.Errorf("%s has key %s, which the local summary lacks", name, k)
			}
		}
	}
}

// getJSON fetches a page endpoint.
func getJSON(t *testing.T, url string, v any) {
	t.Helper()
	res, err := http.Get(url)
	if err != nil {
		t.Fatal(err)
	}
	defer res.Body.Close()
	body, _ := io.ReadAll(res.Body)
	if res.StatusCode != http.StatusOK {
		t.Fatalf("GET %s: %s %s", url, res.Status, body)
	}
	if err := json.Unmarshal(body, v); err != nil {
		t.Fatalf("GET %s: %v", url, err)
	}
}

// testOneOutcome runs one conjugate-gradient and one least-squares solve
// four ways: locally, remotely (--server), detached and then watched, and
// read from the page's JSON; the summaries agree key for key, and the
// state and outcome words are the documented ones in jobs --json, on the
// page and in the server's log. It also checks that a watched
// 1000-iteration job's --history has every one of its 1001 rows.
func testOneOutcome(t *testing.T, bin string, srv *server) {
	dir := t.TempDir()
	for _, c := range []struct {
		name string
		args []string
	}{
		{"cg", []string{"solve", sharedMatrix(t, "bcsstk14.mtx"), "--precond", "jacobi"}},
		{"lsq", []string{"lsq", sharedMatrix(t, "well1033.mtx"), "-b", sharedMatrix(t, "well1033_b.mtx")}},
	} {
		t.Run(c.name, func(t *testing.T) {
			stdout, stderr, code := cli(t, bin, append(c.args, "--json", "--quiet")...)
			if code != 0 {
				t.Fatalf("local: exit %d\n%s", code, stderr)
			}
			local := summaryKeys(t, "local", stdout)
			stdout, stderr, code = cli(t, bin, append(c.args, "--json", "--quiet", "--server", srv.grpc)...)
			if code != 0 {
				t.Fatalf("remote: exit %d\n%s", code, stderr)
			}
			remote := summaryKeys(t, "remote", stdout)
			stdout, stderr, code = cli(t, bin, append(c.args, "--json", "--server", srv.grpc, "--detach")...)
			if code != 0 {
				t.Fatalf("detach: exit %d\n%s", code, stderr)
			}
			var det struct {
				JobID string `json:"job_id"`
			}
			if err := json.Unmarshal([]byte(stdout), &det); err != nil || det.JobID == "" {
				t.Fatalf("detach printed %q: %v", stdout, err)
			}
			stdout, stderr, code = cli(t, bin, "watch", det.JobID, "--server", srv.grpc, "--json", "--quiet")
			if code != 0 {
				t.Fatalf("watch: exit %d\n%s", code, stderr)
			}
			watched := summaryKeys(t, "watch", stdout)
			var page struct {
				State, Outcome string
				Results        []json.RawMessage
			}
			getJSON(t, "http://"+srv.web+"/api/jobs/"+det.JobID, &page)
			if page.State != "done" || page.Outcome != "converged" || len(page.Results) != 1 {
				t.Fatalf("page: state %q, outcome %q, %d results", page.State, page.Outcome, len(page.Results))
			}
			paged := summaryKeys(t, "page", string(page.Results[0]))
			if local["status"] != "converged" {
				t.Fatalf("local status %v", local["status"])
			}
			sameSummaries(t, local, map[string]map[string]any{"remote": remote, "watch": watched, "page": paged})

			stdout, _, code = cli(t, bin, "jobs", "--server", srv.grpc, "--json")
			var list struct {
				Jobs []struct{ ID, State, Outcome string }
			}
			if err := json.Unmarshal([]byte(stdout), &list); err != nil || code != 0 {
				t.Fatalf("jobs --json: %v", err)
			}
			for _, j := range list.Jobs {
				if j.ID == det.JobID && (j.State != "done" || j.Outcome != "converged") {
					t.Errorf("jobs: %s is %s/%s, want done/converged", j.ID, j.State, j.Outcome)
				}
			}
			if !strings.Contains(srv.log(), "job="+det.JobID+" matrix=") ||
				!strings.Contains(srv.log(), "state=done outcome=converged") {
				t.Errorf("the server's log does not say state=done outcome=converged for %s", det.JobID)
			}
		})
	}

	t.Run("full history", func(t *testing.T) {
		// Unpreconditioned CG on a 40³ jump3d grid needs thousands of
		// iterations to 1e-13: capped at 1000, it stops at exactly 1000, and
		// the server's history has iterations 0 to 1000, whatever the
		// progress stream sent (every 200 ms).
		big := filepath.Join(dir, "big.mtx")
		if _, stderr, code := cli(t, bin, "generate", "jump3d", "--size", "40", "-o", big); code != 0 {
			t.Fatal(stderr)
		}
		stdout, stderr, code := cli(t, bin, "solve", "--server", srv.grpc, big, "--precond", "none", "--rtol", "1e-13",
			"--max-iter", "1000", "--detach")
		if code != 0 {
			t.Fatalf("detach: exit %d\n%s", code, stderr)
		}
		job := strings.TrimSpace(stdout)
		hist := filepath.Join(dir, "watched.csv")
		stdout, stderr, code = cli(t, bin, "watch", job, "--server", srv.grpc, "--json", "--quiet", "--history", hist)
		if w := decodeReport(t, stdout); code != exitNotConverged || w.Status != "iteration-limit" || w.Iterations != 1000 {
			t.Fatalf("watch: exit %d, status %s, %d iterations\n%s", code, w.Status, w.Iterations, stderr)
		}
		h := readHistory(t, hist)
		if len(h.Rows) != 1001 {
			t.Fatalf("watch --history wrote %d rows, want 1001", len(h.Rows))
		}
		for i, r := range h.Rows {
			if r.Iteration != i {
				t.Fatalf("row %d is iteration %d", i, r.Iteration)
			}
		}
	})
}
