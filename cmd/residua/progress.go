package main

import "github.com/residua/residua/krylov"

// tee is a krylov.Recorder that passes every call to each of its
// recorders in order; the first error from Record stops the solve.
type tee []krylov.Recorder

func (t tee) Record(p krylov.Progress) error {
	for _, r := range t {
		if err := r.Record(p); err != nil {
			return err
		}
	}
	return nil
}

func (t tee) Finish(res *krylov.Result) {
	for _, r := range t {
		r.Finish(res)
	}
}
