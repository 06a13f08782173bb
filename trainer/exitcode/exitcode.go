// Package exitcode fixes the trainer's process exit codes, a stable contract with the controller:
// the train Job's pod failure policy fails a shard at once on a permanent error and retries a
// transient one.
package exitcode

const (
	// OK: the command did all its work.
	OK = 0
	// Internal: an unexpected failure (a bug); retried like a transient error.
	Internal = 1
	// Config: the run configuration or the command line is invalid. Permanent: retrying cannot help.
	Config = 2
	// Data: an input object is broken (corrupt Parquet, unreadable header). Permanent for the shard.
	Data = 3
	// Transient: storage was unreachable, timed out or refused for a reason that may pass. Retried.
	Transient = 4
	// Refused: publish found too few forecasts to replace the published ones (the run
	// configuration's publish guard) and left latest.json where it was. Permanent: the same
	// shard outputs give the same verdict.
	Refused = 5
)

// Permanent lists the codes on which retrying a shard cannot succeed.
var Permanent = []int32{Config, Data, Refused}
