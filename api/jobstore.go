package api

import (
	"context"
	"encoding/binary"
	"encoding/json"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"syscall"
	"time"

	bolt "go.etcd.io/bbolt"
	bolterrors "go.etcd.io/bbolt/errors"
	"google.golang.org/protobuf/proto"

	"github.com/residua/residua/checkpoint"
	"github.com/residua/residua/csrfile"
	"github.com/residua/residua/internal/atomicfile"
	"github.com/residua/residua/krylov"
	pb "github.com/residua/residua/proto/residua/v1"
	"github.com/residua/residua/solve"
	"github.com/residua/residua/wire"
)

// DefaultCheckpointEvery is the default of Config.CheckpointEvery.
const DefaultCheckpointEvery = 30 * time.Second

// jobStore keeps the server's jobs in the data folder, so that a restart
// (or a crash) loses at most the work since the last checkpoint:
//
//	DIR/jobs.db          job records and histories (go.etcd.io/bbolt)
//	DIR/jobs/ID.K.ck     the last checkpoint of right-hand side K of a
//	                     running detached job (package checkpoint)
//	DIR/jobs/ID.K.x      the kept solution of right-hand side K (csrfile)
//
// Why bbolt: it is embedded (no server to run beside residua), one file,
// pure Go, and transactional: a committed transaction is on disk (fsync)
// when Update returns, and a crash during a commit leaves the previous
// state, because pages are copied on write and the two meta pages
// alternate. It is the store etcd keeps its own state in, and well kept.
// The records are small (the request, the results); the vectors live in
// files beside it.
//
// A job's record is written before its id is sent to the client, so a job
// id means the job will run or its record says why not. After a restart:
// finished jobs are listed again with their results and histories, and
// their kept solutions are downloadable from the files until the job is
// forgotten (the oldest finished jobs past Config.MaxJobsKept, as in
// memory); queued and running detached jobs run again, each right-hand
// side already solved restored, the current one resumed from its last
// checkpoint (or from x0 when none was written yet); an attached job,
// whose client's stream died with the server, is recorded as cancelled,
// saying so.
type jobStore struct {
	data  *dataDir // the disk budget the job files count against
	db    *bolt.DB
	dir   string
	log   *slog.Logger
	every time.Duration
}

var (
	bucketJobs    = []byte("jobs")
	bucketHistory = []byte("history")
)

// jobRecord is one job's record.
type jobRecord struct {
	ID       string    `json:"id"`
	Created  time.Time `json:"created"`
	Request  []byte    `json:"request"` // the pb.SolveRequest
	Info     []byte    `json:"info"`    // the pb.Job static description
	Detached bool      `json:"detached"`
	Keep     bool      `json:"keep"`
	Done     bool      `json:"done"`
	Outcome  string    `json:"outcome,omitempty"`
	Error    string    `json:"error,omitempty"`
	Started  time.Time `json:"started,omitzero"`
	Finished time.Time `json:"finished,omitzero"`
	// Results are the pb.SolveResult of the right-hand sides finished so
	// far, in order.
	Results [][]byte `json:"results,omitempty"`
	// Restarts counts the restarts the job was resumed after.
	Restarts int `json:"restarts,omitempty"`
}

func openJobStore(root string, every time.Duration, log *slog.Logger) (*jobStore, error) {
	dir := filepath.Join(root, "jobs")
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, fmt.Errorf("api: data folder: %w", err)
	}
	gone, err := atomicfile.RemoveTemps(dir)
	if err != nil {
		return nil, fmt.Errorf("api: data folder: %w", err)
	}
	for _, name := range gone {
		log.Warn("data folder: removed a partial write", "file", filepath.Join(dir, name))
	}
	path := filepath.Join(root, "jobs.db")
	db, err := bolt.Open(path, 0o644, &bolt.Options{Timeout: 2 * time.Second})
	if err != nil {
		return nil, fmt.Errorf("api: opening the job store %s: %w", path, err)
	}
	err = db.Update(func(tx *bolt.Tx) error {
		for _, b := range [][]byte{bucketJobs, bucketHistory} {
			if _, err := tx.CreateBucketIfNotExists(b); err != nil {
				return err
			}
		}
		return nil
	})
	if err != nil {
		db.Close()
		return nil, fmt.Errorf("api: the job store %s: %w", path, err)
	}
	return &jobStore{db: db, dir: dir, log: log, every: every}, nil
}

// openJobStoreOrQuarantine opens the job store; when its file is damaged
// (bbolt refuses it: a torn meta page, a bad checksum) the file is moved to
// the quarantine folder with a log line and an empty store is started, so
// that the server serves its matrices still. A store held by another
// process is an error.
func openJobStoreOrQuarantine(root string, every time.Duration, log *slog.Logger, d *dataDir) (*jobStore, error) {
	js, err := openJobStore(root, every, log)
	if err == nil {
		js.data = d
	}
	if err == nil || errors.Is(err, bolterrors.ErrTimeout) {
		return js, err
	}
	path := filepath.Join(root, "jobs.db")
	if _, serr := os.Stat(path); serr != nil {
		return nil, err
	}
	d.quarantineFile(path, err.Error())
	if js, err = openJobStore(root, every, log); err == nil {
		js.data = d
	}
	return js, err
}

func (js *jobStore) close() error { return js.db.Close() }

// reserve accounts a job file of size bytes in the disk budget.
func (js *jobStore) reserve(path string, size int64, what string) error {
	if js.data == nil {
		return nil
	}
	return js.data.reserveFile(path, size, what)
}

// removeFile deletes a job file and its accounting.
func (js *jobStore) removeFile(path string) {
	if js.data == nil {
		os.Remove(path)
		return
	}
	js.data.releaseFile(path)
}

func (js *jobStore) checkpointPath(id string, rhs int) string {
	return filepath.Join(js.dir, id+"."+strconv.Itoa(rhs)+".ck")
}

func (js *jobStore) solutionPath(id string, rhs int) string {
	return filepath.Join(js.dir, id+"."+strconv.Itoa(rhs)+".x")
}

// put writes rec (a committed, fsynced transaction).
func (js *jobStore) put(rec *jobRecord) error {
	v, err := json.Marshal(rec)
	if err != nil {
		return err
	}
	return js.db.Update(func(tx *bolt.Tx) error { return tx.Bucket(bucketJobs).Put([]byte(rec.ID), v) })
}

// update reads the record id, changes it with f and writes it back, in
// one transaction.
func (js *jobStore) update(id string, f func(*jobRecord)) error {
	return js.db.Update(func(tx *bolt.Tx) error {
		b := tx.Bucket(bucketJobs)
		raw := b.Get([]byte(id))
		if raw == nil {
			return notFoundf("job %s has no record", id)
		}
		var rec jobRecord
		if err := json.Unmarshal(raw, &rec); err != nil {
			return err
		}
		f(&rec)
		v, err := json.Marshal(&rec)
		if err != nil {
			return err
		}
		return b.Put([]byte(id), v)
	})
}

// putHistory stores the history rows of right-hand side rhs.
func (js *jobStore) putHistory(id string, rhs int, rows []krylov.Progress) error {
	return js.db.Update(func(tx *bolt.Tx) error {
		return tx.Bucket(bucketHistory).Put([]byte(id+"/"+strconv.Itoa(rhs)), encodeRows(rows))
	})
}

// history returns the stored rows of right-hand side rhs.
func (js *jobStore) history(id string, rhs int) ([]krylov.Progress, error) {
	var rows []krylov.Progress
	err := js.db.View(func(tx *bolt.Tx) error {
		var err error
		rows, err = decodeRows(tx.Bucket(bucketHistory).Get([]byte(id + "/" + strconv.Itoa(rhs))))
		return err
	})
	return rows, err
}

// remove deletes a job's record, histories and files.
func (js *jobStore) remove(id string, nrhs int) {
	err := js.db.Update(func(tx *bolt.Tx) error {
		if err := tx.Bucket(bucketJobs).Delete([]byte(id)); err != nil {
			return err
		}
		for i := range nrhs {
			if err := tx.Bucket(bucketHistory).Delete([]byte(id + "/" + strconv.Itoa(i))); err != nil {
				return err
			}
		}
		return nil
	})
	if err != nil {
		js.log.Error("job store: deleting a record", "job", id, "error", err.Error())
	}
	for i := range nrhs {
		js.removeFile(js.checkpointPath(id, i))
		js.removeFile(js.solutionPath(id, i))
	}
}

// records returns every record, in creation order. A record that does not
// decode is deleted with a log line naming it.
func (js *jobStore) records() ([]*jobRecord, error) {
	var out []*jobRecord
	var bad [][]byte
	err := js.db.View(func(tx *bolt.Tx) error {
		return tx.Bucket(bucketJobs).ForEach(func(k, v []byte) error {
			rec := &jobRecord{}
			if err := json.Unmarshal(v, rec); err != nil || rec.ID != string(k) {
				bad = append(bad, append([]byte(nil), k...))
				return nil
			}
			out = append(out, rec)
			return nil
		})
	})
	if err != nil {
		return nil, err
	}
	for _, k := range bad {
		js.log.Warn("job store: dropped a record that does not decode", "job", string(k))
		_ = js.db.Update(func(tx *bolt.Tx) error { return tx.Bucket(bucketJobs).Delete(k) })
	}
	sortRecords(out)
	return out, nil
}

func sortRecords(rs []*jobRecord) {
	for i := 1; i < len(rs); i++ {
		for k := i; k > 0 && rs[k].Created.Before(rs[k-1].Created); k-- {
			rs[k], rs[k-1] = rs[k-1], rs[k]
		}
	}
}

// encodeRows packs history rows: per row the iteration and the elapsed
// nanoseconds (int64), ‖r‖, ‖r‖/‖b‖ and ‖Aᵀr‖ (float64 bits), little-endian.
func encodeRows(rows []krylov.Progress) []byte {
	b := make([]byte, 0, 40*len(rows))
	for _, p := range rows {
		b = binary.LittleEndian.AppendUint64(b, uint64(p.Iteration))
		b = binary.LittleEndian.AppendUint64(b, uint64(p.Elapsed))
		b = binary.LittleEndian.AppendUint64(b, math.Float64bits(p.ResidualNorm))
		b = binary.LittleEndian.AppendUint64(b, math.Float64bits(p.RelResidual))
		b = binary.LittleEndian.AppendUint64(b, math.Float64bits(p.NormalResidualNorm))
	}
	return b
}

func decodeRows(b []byte) ([]krylov.Progress, error) {
	if len(b)%40 != 0 {
		return nil, fmt.Errorf("a stored history of %d bytes is not whole rows of 40", len(b))
	}
	rows := make([]krylov.Progress, len(b)/40)
	for i := range rows {
		r := b[40*i:]
		rows[i] = krylov.Progress{
			Iteration: int(binary.LittleEndian.Uint64(r)), Elapsed: time.Duration(binary.LittleEndian.Uint64(r[8:])),
			ResidualNorm:       math.Float64frombits(binary.LittleEndian.Uint64(r[16:])),
			RelResidual:        math.Float64frombits(binary.LittleEndian.Uint64(r[24:])),
			NormalResidualNorm: math.Float64frombits(binary.LittleEndian.Uint64(r[32:])),
		}
	}
	return rows, nil
}

// errStopping is the cause given to the jobs cancelled by a shutdown: a
// detached job cancelled by it keeps its record open, and runs again
// after the restart.
var errStopping = errors.New("server shutting down")

// persistQueued writes a new job's record; it must succeed before the job
// id reaches the client.
func (s *Server) persistQueued(j *job, req *pb.SolveRequest) error {
	if s.jobsDB == nil {
		return nil
	}
	raw, err := proto.Marshal(req)
	if err != nil {
		return err
	}
	info, err := proto.Marshal(j.info)
	if err != nil {
		return err
	}
	rec := &jobRecord{ID: j.id, Created: j.created, Request: raw, Info: info, Detached: req.GetDetach(), Keep: j.keep}
	if err := s.jobsDB.put(rec); err != nil {
		return fmt.Errorf("recording job %s in the data folder: %w", j.id, storeErr(err))
	}
	return nil
}

// storeErr turns a full disk into ErrLimit.
func storeErr(err error) error {
	if errors.Is(err, syscall.ENOSPC) || errors.Is(err, syscall.EDQUOT) {
		return limitf("the data folder's disk is full: %v", err)
	}
	return err
}

// durable returns the checkpointing of right-hand side i of a detached
// job (none for an attached one, which cannot outlive its stream), and
// the state to resume from when the job was interrupted there.
func (s *Server) durable(j *job, p *jobParams, i int, b []float64) solve.Durable {
	var d solve.Durable
	if s.jobsDB == nil || !j.info.GetDetached() {
		return d
	}
	path := s.jobsDB.checkpointPath(j.id, i)
	rhsID := wire.VectorSum(b)
	if f, err := checkpoint.Read(path); err == nil {
		if err := f.Matches(p.matrixID, rhsID, p.req); err != nil {
			s.log.Warn("job store: checkpoint does not fit the job; starting the right-hand side again", "job", j.id, "rhs", i, "error", err.Error())
		} else {
			d.Resume = f.State
			for _, row := range f.History {
				j.logs[i].Record(row)
			}
			s.log.Info("job resumed", "job", j.id, "rhs", i, "iteration", f.State.Iteration)
		}
	} else if !errors.Is(err, os.ErrNotExist) {
		s.log.Warn("job store: checkpoint unreadable; starting the right-hand side again", "job", j.id, "rhs", i, "file", path, "error", err.Error())
	}
	log := j.logs[i]
	d.Checkpoint = &krylov.Checkpoint{Every: s.jobsDB.every, Save: func(st *krylov.State) error {
		f := &checkpoint.File{MatrixID: p.matrixID, RHSID: rhsID, Request: p.req, Written: time.Now(),
			History: rowsUpTo(log.Snapshot().Rows, st.Iteration), State: st}
		// Reserve what the file will take (the vectors, the history rows,
		// and headers and checksums well within 64 KiB), then what it took.
		est := int64(40*len(f.History) + 64<<10)
		for _, v := range st.Vectors {
			est += 8 * int64(len(v))
		}
		if err := s.jobsDB.reserve(path, est, "the checkpoint of job "+j.id); err != nil {
			s.log.Warn("job store: checkpoint not written (the job goes on)", "job", j.id, "rhs", i, "error", err.Error())
			return nil
		}
		err := checkpoint.Write(path, f)
		if fi, serr := os.Stat(path); serr == nil {
			_ = s.jobsDB.reserve(path, fi.Size(), "")
		}
		if err != nil {
			s.log.Warn("job store: checkpoint not written (the job goes on)", "job", j.id, "rhs", i, "error", err.Error())
		}
		return nil
	}}
	return d
}

func rowsUpTo(rows []krylov.Progress, it int) []krylov.Progress {
	k := len(rows)
	for k > 0 && rows[k-1].Iteration > it {
		k--
	}
	return rows[:k]
}

// persistResult records right-hand side i's result, history and (for a
// job that keeps it) solution, and drops its checkpoint.
func (s *Server) persistResult(j *job, i int, x []float64, res *pb.SolveResult) {
	if s.jobsDB == nil {
		return
	}
	if j.keep && x != nil {
		path, id := s.jobsDB.solutionPath(j.id, i), wire.VectorSum(x)
		if err := s.jobsDB.reserve(path, csrfile.Bytes(csrfile.Vector, len(x), len(x), id, nil), "the solution of job "+j.id); err != nil {
			s.log.Warn("job store: solution not kept on disk (it stays downloadable until a restart)", "job", j.id, "rhs", i, "error", err.Error())
		} else if _, err := csrfile.WriteVector(path, x, id, nil); err != nil {
			s.jobsDB.removeFile(path)
			s.log.Warn("job store: solution not written", "job", j.id, "rhs", i, "error", err.Error())
		}
	}
	if err := s.jobsDB.putHistory(j.id, i, j.logs[i].Snapshot().Rows); err != nil {
		s.log.Warn("job store: history not written", "job", j.id, "rhs", i, "error", err.Error())
	}
	raw, _ := proto.Marshal(res)
	if err := s.jobsDB.update(j.id, func(r *jobRecord) {
		if len(r.Results) == i {
			r.Results = append(r.Results, raw)
		}
		if r.Started.IsZero() {
			r.Started = time.Now()
		}
	}); err != nil {
		s.log.Warn("job store: result not recorded", "job", j.id, "rhs", i, "error", err.Error())
	}
	s.jobsDB.removeFile(s.jobsDB.checkpointPath(j.id, i))
}

// persistEnd records how a job ended, unless a shutdown interrupted a
// detached job, which then stays open to run again after the restart.
func (s *Server) persistEnd(j *job, outcome solve.Outcome, err error) {
	if s.jobsDB == nil {
		return
	}
	if j.info.GetDetached() && errors.Is(err, errStopping) {
		s.log.Info("job store: job interrupted by the shutdown; it runs again after the restart", "job", j.id)
		return
	}
	msg := ""
	if err != nil {
		msg = err.Error()
	}
	if uerr := s.jobsDB.update(j.id, func(r *jobRecord) {
		r.Done, r.Outcome, r.Error, r.Finished = true, string(outcome), msg, time.Now()
	}); uerr != nil {
		s.log.Warn("job store: end not recorded", "job", j.id, "error", uerr.Error())
	}
}

// restoreJobs runs at start-up: finished jobs come back as finished,
// queued and running detached jobs run again, attached ones are recorded
// as cancelled.
func (s *Server) restoreJobs() {
	if s.jobsDB == nil {
		return
	}
	start := time.Now()
	recs, err := s.jobsDB.records()
	if err != nil {
		s.log.Error("job store: reading the records", "error", err.Error())
		return
	}
	resumed, finished := 0, 0
	for _, rec := range recs {
		if !rec.Done && !rec.Detached {
			rec.Done, rec.Outcome, rec.Finished = true, string(solve.Cancelled), time.Now()
			rec.Error = "the server restarted while the job ran attached to its client's stream, which ended with it; submit the job again"
			_ = s.jobsDB.put(rec)
		}
		if rec.Done {
			if err := s.restoreFinished(rec); err != nil {
				s.log.Warn("job store: finished job not restored", "job", rec.ID, "error", err.Error())
				continue
			}
			finished++
			continue
		}
		if err := s.resumeJob(rec); err != nil {
			s.log.Warn("job store: job could not run again", "job", rec.ID, "error", err.Error())
			rec.Done, rec.Outcome, rec.Finished = true, string(solve.Failed), time.Now()
			rec.Error = "after a restart the job could not run again: " + err.Error()
			_ = s.jobsDB.put(rec)
			if err := s.restoreFinished(rec); err == nil {
				finished++
			}
			continue
		}
		resumed++
	}
	s.log.Info("job store opened", "finished_jobs", finished, "resumed_jobs", resumed, "duration", time.Since(start).String())
}

// resumeJob submits a stored queued or running detached job again, under
// its id, with the right-hand sides it had finished restored.
func (s *Server) resumeJob(rec *jobRecord) error {
	req := &pb.SolveRequest{}
	if err := proto.Unmarshal(rec.Request, req); err != nil {
		return fmt.Errorf("the stored request does not decode: %w", err)
	}
	j, p, err := s.newJobWithID(req, rec.ID)
	if err != nil {
		return err
	}
	j.created = rec.Created
	p.done = make([]*pb.SolveResult, 0, len(rec.Results))
	for _, raw := range rec.Results {
		res := &pb.SolveResult{}
		if err := proto.Unmarshal(raw, res); err != nil {
			p.release()
			j.runnerPin.Release()
			return fmt.Errorf("a stored result does not decode: %w", err)
		}
		p.done = append(p.done, res)
	}
	if err := s.jobs.add(j); err != nil {
		p.release()
		j.runnerPin.Release()
		return err
	}
	rec.Restarts++
	_ = s.jobsDB.put(rec)
	s.log.Info("job queued again after a restart", "job", j.id, "matrix", p.matrixID, "rhs_done", len(p.done), "restarts", rec.Restarts)
	s.jobs.start(j, func() (solve.Outcome, error) {
		o, err := s.runJob(j, p)
		s.persistEnd(j, o, err)
		return o, err
	})
	return nil
}

// restoreRHS publishes a right-hand side finished before the restart: its
// history from the store, its kept solution from its file (read when
// downloaded), its result.
func (s *Server) restoreRHS(j *job, i int, res *pb.SolveResult) {
	if rows, err := s.jobsDB.history(j.id, i); err == nil {
		for _, row := range rows {
			j.logs[i].Record(row)
		}
	}
	j.publish(&pb.JobEvent{Event: &pb.JobEvent_Result{Result: res}})
}

// restoreFinished puts a finished job back in the registry as it ended.
func (s *Server) restoreFinished(rec *jobRecord) error {
	info := &pb.Job{}
	if err := proto.Unmarshal(rec.Info, info); err != nil {
		return fmt.Errorf("the stored description does not decode: %w", err)
	}
	j := newJob(rec.ID, int(info.GetRhsCount()), rec.Keep)
	j.info, j.created = info, rec.Created
	for i, raw := range rec.Results {
		res := &pb.SolveResult{}
		if err := proto.Unmarshal(raw, res); err != nil || i >= len(j.logs) {
			return fmt.Errorf("stored result %d does not decode", i)
		}
		s.restoreRHS(j, i, res)
	}
	// The kept solutions stay in their files; solutionOf reads them.
	var err error
	if rec.Error != "" {
		err = errors.New(rec.Error)
	}
	s.jobs.addFinished(j, solve.Outcome(rec.Outcome), err, rec.Started, rec.Finished)
	return nil
}

// solutionOf returns a finished job's kept solution: from memory, or,
// after a restart, from its file in the data folder.
func (s *Server) solutionOf(j *job, rhs int) ([]float64, error) {
	x, err := j.solution(rhs)
	if err == nil || s.jobsDB == nil || !j.keep {
		return x, err
	}
	y, _, ferr := csrfile.ReadVector(s.jobsDB.solutionPath(j.id, rhs))
	if ferr != nil {
		if errors.Is(ferr, os.ErrNotExist) {
			return nil, err
		}
		return nil, notFoundf("job %s: the kept solution of right-hand side %d is damaged on disk: %v", j.id, rhs, ferr)
	}
	return y, nil
}

// addFinished registers a job restored from the store as finished: its
// finished event is in its replay, it counts against MaxJobsKept, and the
// observer is not told (it ended before this process started).
func (r *Registry) addFinished(j *job, outcome solve.Outcome, err error, started, finished time.Time) {
	j.mu.Lock()
	j.state = pb.JobState_DONE
	j.outcome, j.err = outcome, err
	j.started, j.finished = started, finished
	fin := &pb.Finished{State: pb.JobState_DONE, Outcome: string(outcome), ElapsedSeconds: finished.Sub(j.created).Seconds()}
	if err != nil {
		fin.Error = err.Error()
	}
	j.publishLocked(&pb.JobEvent{Event: &pb.JobEvent_Finished{Finished: fin}})
	close(j.done)
	j.mu.Unlock()
	j.cancel(context.Canceled)
	r.mu.Lock()
	r.jobs[j.id] = j
	r.order = append(r.order, j)
	r.mu.Unlock()
}
