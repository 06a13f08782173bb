// Command fault stands in for the faulty trainer images of the e2e scenarios: it misbehaves as
// MODE says for one kind of pod and otherwise runs the real trainer with the pod's arguments.
//
//	fault MODE TRAINER STATE [trainer arguments...]
//
// TRAINER is the trainer's path (inside the image when the pod runs in the image's root), STATE
// a directory with markers/ and gates/ that the test shares with every pod. The pod's step is
// the first trainer argument; its shard is JOB_COMPLETION_INDEX, set by the Job controller.
//
//	flaky      the first attempt of train shard 1 of a run fails with exit 4 (a marker
//	           directory markers/<run>-1, made atomically with mkdir, records the attempt)
//	broken     train shard 1 always fails with exit 3
//	gated      train shards 1 and up wait until gates/<portfolio> exists
//	lingering  train runs, then the pod keeps running until gates/<portfolio> exists, and
//	           exits with the trainer's status
//
// The e2e suite builds it static and runs it on the host or, with the trainer image, inside
// the image's root beside the trainer, so it needs no shell.
package main

import (
	"errors"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"syscall"
	"time"

	"almanac.dev/almanac/test/sandbox"
)

func main() {
	if len(os.Args) < 4 {
		fmt.Fprintln(os.Stderr, "usage: fault MODE TRAINER STATE [trainer arguments...]")
		os.Exit(2)
	}
	mode, trainer, state, args := os.Args[1], os.Args[2], os.Args[3], os.Args[4:]
	train := len(args) > 0 && args[0] == "train"
	index := os.Getenv("JOB_COMPLETION_INDEX")
	gate := filepath.Join(state, "gates", os.Getenv("ALMANAC_PORTFOLIO"))
	switch mode {
	case "flaky":
		if train && index == "1" && os.Mkdir(filepath.Join(state, "markers", os.Getenv("ALMANAC_RUN")+"-1"), 0o755) == nil {
			fmt.Fprintln(os.Stderr, "flaky: first attempt of shard 1 fails (exit 4)")
			os.Exit(4)
		}
	case "broken":
		if train && index == "1" {
			fmt.Fprintln(os.Stderr, "broken: shard 1 always fails (exit 3)")
			os.Exit(3)
		}
	case "gated":
		if train && index != "0" {
			waitFor(gate)
		}
	case "lingering":
		if train {
			cmd := exec.Command(trainer, args...)
			cmd.Stdout, cmd.Stderr = os.Stdout, os.Stderr
			err := cmd.Run()
			var exit *exec.ExitError
			if err != nil && !errors.As(err, &exit) {
				fmt.Fprintln(os.Stderr, "lingering:", err)
				os.Exit(128)
			}
			waitFor(gate)
			os.Exit(sandbox.ExitStatus(cmd.ProcessState))
		}
	default:
		fmt.Fprintf(os.Stderr, "fault: unknown mode %q\n", mode)
		os.Exit(2)
	}
	err := syscall.Exec(trainer, append([]string{trainer}, args...), os.Environ())
	fmt.Fprintln(os.Stderr, "fault: exec", trainer, err)
	os.Exit(128)
}

// waitFor returns once path exists.
func waitFor(path string) {
	for {
		if _, err := os.Stat(path); err == nil {
			return
		}
		time.Sleep(200 * time.Millisecond)
	}
}
