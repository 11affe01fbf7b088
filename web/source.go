package web

import (
	"context"

	"github.com/residua/residua/api"
	pb "github.com/residua/residua/proto/residua/v1"
)

// Source is what the page reads: a job registry. *api.Registry provides it
// through FromRegistry; tests use a fake.
type Source interface {
	// Jobs returns a snapshot of every job, newest first.
	Jobs() []*pb.Job
	// Subscribe follows one job's events: first those recorded so far,
	// then the live ones, ending with the finished event.
	Subscribe(id string) (Events, error)
}

// Events is one subscription to a job's events.
type Events interface {
	// Next returns the next event, waiting for it; io.EOF after the
	// finished event.
	Next(ctx context.Context) (*pb.JobEvent, error)
	// Close ends the subscription.
	Close()
}

// FromRegistry returns the Source that reads the gRPC service's job
// registry.
func FromRegistry(r *api.Registry) Source { return registrySource{r} }

type registrySource struct{ r *api.Registry }

func (s registrySource) Jobs() []*pb.Job { return s.r.Jobs() }

func (s registrySource) Subscribe(id string) (Events, error) {
	sub, err := s.r.Subscribe(id)
	if err != nil {
		return nil, err
	}
	return sub, nil
}
