package store

// afterCommit, when set, is called after every mutation the store committed: a Write whose
// object is in place, a Copy, a Delete. Only test builds set it (crashpoint_hook.go, build tag
// `crashpoints`, for test/crash's crash-point enumeration); in every other build it stays nil
// and committed costs one comparison.
var afterCommit func(op, key string)

// committed reports one committed mutation to afterCommit.
func committed(op, key string) {
	if afterCommit != nil {
		afterCommit(op, key)
	}
}

// CrashAfterWritesEnv names the environment variable a `crashpoints` build of the trainer
// reads: with a value k >= 1 the process kills itself with SIGKILL right after its k-th
// committed mutation (Write, Copy or Delete, counted in commit order; writes of one process
// that run concurrently commit in the order they finish), printing a line that starts with
// CrashMarker to stderr first. Unset, nothing happens. Builds without the tag have no such
// variable.
const CrashAfterWritesEnv = "ALMANAC_CRASH_AFTER_WRITES"

// CrashMarker starts the line a crash point prints before the kill.
const CrashMarker = "crashpoint:"
