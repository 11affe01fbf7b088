// Package metrics holds the service's Prometheus metrics and serves them in
// the Prometheus text exposition format, through
// github.com/prometheus/client_golang. Package web serves Handler at
// /metrics and counts the jobs' lifecycle from the job registry it follows
// (SolveStarted, SolveFinished, IterationsDone). What only the service
// knows is read at each scrape through functions it provides: the queue
// (ObserveQueue, with api's Registry.Counts), the bytes uploaded
// (ObserveUploads) and the bytes stored (ObserveStore). A metric whose
// function was never given is absent rather than a misleading zero.
//
// # Metrics
//
// All names carry the residua_ prefix, counters end in _total and units are
// base units (seconds, bytes), as the Prometheus naming conventions ask:
//
//	residua_solves_started_total                 counter   jobs accepted
//	residua_solves_finished_total{outcome}       counter   jobs ended, by outcome
//	residua_solves_running                       gauge     jobs iterating now
//	residua_solves_queued                        gauge     jobs waiting for a slot
//	residua_iterations_total                     counter   Krylov iterations done
//	residua_solve_duration_seconds               histogram wall time of a job, submission to end
//	residua_upload_bytes_total                   counter   bytes received by uploads
//	residua_stored_matrix_bytes                  gauge     bytes of stored matrices
//	residua_cached_preconditioner_bytes          gauge     bytes of cached preconditioners
//
// plus the Go runtime's and the process's standard collectors (go_*,
// process_*).
//
// The outcome label takes one of a fixed set of values (Outcomes): the
// krylov status names for a job that ran to a status ("converged",
// "iteration-limit", "time-limit", "stagnated", "breakdown", and
// "cancelled"), and "failed" for a job stopped by an error before it had
// one. Any other value is counted as "other", so a caller's mistake cannot
// grow the label set without bound.
//
// # Use
//
// New returns a Metrics with its own registry (not the global default one,
// so tests and several servers in one process do not collide). Every
// method is safe for concurrent use and does nothing on a nil *Metrics, so
// code without metrics just holds a nil pointer.
package metrics
