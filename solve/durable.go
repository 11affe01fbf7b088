package solve

import "github.com/residua/residua/krylov"

// Durable is what a solve that must survive its process needs besides the
// request: the checkpoint hook the method calls with its state (every few
// seconds, on demand, and when the solve is cancelled), and a state to
// resume from. The zero value is an ordinary solve. See krylov's package
// documentation, "Checkpoints and resume", for what a state holds and why a
// resumed solve repeats the uninterrupted one bit for bit; the caller checks
// that a Resume state belongs to this matrix, right-hand side and request
// (package checkpoint's File.Matches).
type Durable struct {
	Checkpoint *krylov.Checkpoint
	Resume     *krylov.State
}
