// Package web serves the watch page of `residua serve --http`: the list of
// solve jobs with their residual curves updating live, JSON endpoints for
// the jobs and their histories, and the Prometheus metrics.
//
// # What it reads
//
// A Server reads a Source, the job registry of the gRPC service
// (FromRegistry adapts *api.Registry; tests use a fake). It reads the job
// list every Options.Poll (250 ms), subscribes to each new job's events and
// keeps its progress rows per right-hand side, and forgets a job when the
// registry does. Rows are bounded: past 4096 for one right-hand side every
// second row is dropped and the rest of the solve is sampled half as often,
// so the curve spans the whole solve in bounded memory. The registry itself
// may have thinned a long history before the page subscribed.
//
// # Endpoints
//
//	GET /                             the page (embedded HTML, CSS and JavaScript; no network needed)
//	GET /api/jobs                     {"jobs": [Job, ...], "total": N}, newest first
//	GET /api/jobs/{id}                one Job
//	GET /api/jobs/{id}/history        {"id", "series": [{"rhs", "rows": [Row, ...]}, ...]}
//	    ?rhs=N                        only right-hand side N (0-based)
//	    ?format=csv|jsonl             one right-hand side (default 0) as a history file (package history)
//	GET /api/jobs/{id}/chart.svg      the residual curves as SVG (package chart); 404 before any progress
//	GET /api/events                   Server-Sent Events: "jobs" events carrying the 50 newest jobs and the total
//	GET /metrics                      Prometheus text format (when Options.Metrics is set)
//	POST /api/session                 sign-in: trades the bearer token for the session cookie
//
// # Authentication
//
// With Options.Token set (serve --token-file), /api/* and /metrics need
// "Authorization: Bearer <token>" or the session cookie, and answer 401
// with a Bearer challenge (RFC 6750 §3) otherwise; the page, its static
// files and the sign-in stay open. The page asks for the token when the
// job list answers 401, sends it once to POST /api/session and clears the
// input; the cookie it gets back (SessionCookie) is HttpOnly,
// SameSite=Strict, lives for the browser session and holds a SHA-256
// digest of the token, so the page never keeps the token and the cookie
// cannot be used as one against the gRPC service. A scraper uses the
// bearer token, or serve --metrics-listen, which serves /metrics alone on
// its own address without it.
//
// Job and Row document their JSON fields. Numbers that do not exist yet,
// and NaN or infinite values, are null. The estimates (reduction per
// iteration, iterations and seconds left) come from package monitor's Rate
// over the last 50 iterations of the right-hand side being solved, against
// the job's relative tolerance.
//
// The event stream sends the job list at once and after every change, at
// most once per Options.Push (500 ms), with a comment line every 15 s to
// keep idle connections open. The page redraws a job's chart by fetching
// chart.svg again whenever the job's version changes; the server renders
// each version once.
//
// # Lifecycle
//
// New starts the goroutines that follow the jobs; Close stops them and
// ends the open event streams. Serve runs an http.Server on a listener
// until its context is done.
package web
