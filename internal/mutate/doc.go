// Package mutate is residua's mutation check: it plants a documented list of
// realistic bugs (Mutants) in a copy of the source tree, one at a time, runs
// the tests of the packages that should notice each one, and reports which
// bugs the tests let through. A mutant that survives is a gap in the tests:
// the answer is a test that fails on it, never a change to the list.
//
// The check never touches the checkout. Run from the module root,
//
//	RESIDUA_MUTATE=1 go test -v -timeout 2h -run TestMutants ./internal/mutate
//
// copies the tracked and untracked, not ignored, files (git ls-files) into a
// temporary folder, first runs every listed package's tests there unchanged
// (a suite that already fails kills every mutant and proves nothing), then
// for each mutant applies its edits, checks that the packages still compile
// (a mutant that does not build is a mistake in the list, not a kill), runs
// `go test -count=1 -failfast` on its packages, and restores the file. An
// interrupted run leaves at most a temporary folder behind. RESIDUA_MUTATE_ONLY
// (a regular expression on the mutant names) selects some of them.
//
// Without RESIDUA_MUTATE the long check skips, so `go test ./...` stays
// quick; TestMutantList, which always runs, checks that each mutant's text
// still occurs exactly as often as it says in the current tree, so the list
// cannot go stale silently.
//
// Some mutants can only be caught by tests that need an outside tool
// (Chromium for the watch page, the shared SuiteSparse folder). Where the
// tool is absent such a mutant is reported as not run, and counted apart
// from the score; with CI=true an absent tool fails the check instead.
// TESTING.md at the module root records the list and the last score.
package mutate
