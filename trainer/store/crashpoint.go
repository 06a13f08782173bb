package store

// beforeCommit and afterCommit, when set, are called around every mutation of the store:
// before with the new object's bytes written but not yet in place (file://: the synced
// temporary file before its rename; other stores: the writer before Close completes the
// upload; Copy and Delete: before the request), after once it is committed. Only test builds
// set them (crashpoint_hook.go, build tag `crashpoints`, for test/crash's crash-point
// enumeration); in every other build they stay nil and cost one comparison each.
var beforeCommit, afterCommit func(op, key string)

// committing reports a mutation about to commit to beforeCommit.
func committing(op, key string) {
	if beforeCommit != nil {
		beforeCommit(op, key)
	}
}

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

// CrashBeforeWritesEnv is CrashAfterWritesEnv's twin: the kill comes just before the k-th
// mutation commits, its bytes written (a temporary file, an unfinished upload) but not in place.
const CrashBeforeWritesEnv = "ALMANAC_CRASH_BEFORE_WRITES"

// CrashMarker starts the line a crash point prints before the kill.
const CrashMarker = "crashpoint:"
