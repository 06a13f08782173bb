// Command almanac-trainer is the trainer the almanac Jobs run. This build carries the engine's
// accuracy benchmark; the plan, train, publish, local and inspect commands of the data plane are
// listed in the usage text once they exist.
package main

import (
	"fmt"
	"io"
	"os"

	"almanac.dev/almanac/trainer/bench"
	"almanac.dev/almanac/trainer/exitcode"
)

// version and commit are set at link time (see GO_BUILD_FLAGS in the Makefile).
var (
	version = "dev"
	commit  = "unknown"
)

func main() {
	os.Exit(run(os.Args[1:], os.Stdout, os.Stderr))
}

func run(args []string, stdout, stderr io.Writer) int {
	if len(args) == 0 {
		usage(stderr)
		return exitcode.Config
	}
	switch args[0] {
	case "bench":
		return bench.Main(args[1:], stdout, stderr)
	case "version", "--version":
		fmt.Fprintf(stdout, "almanac-trainer %s (%s)\n", version, commit)
		return exitcode.OK
	case "help", "-h", "--help":
		usage(stdout)
		return exitcode.OK
	}
	fmt.Fprintf(stderr, "almanac-trainer: unknown command %q\n", args[0])
	usage(stderr)
	return exitcode.Config
}

func usage(w io.Writer) {
	fmt.Fprint(w, `usage: almanac-trainer <command> [flags]

commands:
  bench     score the model zoo on a dataset in the M3 layout (--data DIR or --m3); --help for flags
  version   print the version

exit codes: 0 ok, 1 internal error, 2 configuration error, 3 broken input data, 4 transient storage error
`)
}
