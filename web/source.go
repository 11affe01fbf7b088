package web

import (
	"github.com/residua/residua/api"
	"github.com/residua/residua/history"
	pb "github.com/residua/residua/proto/residua/v1"
)

// Source is what the page reads: a job registry. *api.Registry provides it
// through FromRegistry; tests use a fake.
type Source interface {
	// Jobs returns a snapshot of every job, newest first.
	Jobs() []*pb.Job
	// History returns the full history of each of a job's right-hand
	// sides, as the server records it (every iteration, thinned evenly
	// past a budget), and a version that changes whenever the job does.
	History(id string) ([]history.History, uint64, error)
}

// FromRegistry returns the Source that reads the gRPC service's job
// registry.
func FromRegistry(r *api.Registry) Source { return r }
