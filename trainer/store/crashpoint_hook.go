//go:build crashpoints

package store

import (
	"fmt"
	"os"
	"strconv"
	"sync"
	"syscall"
)

func init() {
	for _, c := range []struct {
		env, when string
		hook      *func(op, key string)
	}{{CrashAfterWritesEnv, "after committed", &afterCommit}, {CrashBeforeWritesEnv, "before committing", &beforeCommit}} {
		v := os.Getenv(c.env)
		if v == "" {
			continue
		}
		k, err := strconv.Atoi(v)
		if err != nil || k < 1 {
			fmt.Fprintf(os.Stderr, "%s %s=%q is not a count >= 1\n", CrashMarker, c.env, v)
			os.Exit(2)
		}
		*c.hook = killAt(k, c.when)
	}
}

// killAt returns a hook that sends the process SIGKILL on its k-th call.
func killAt(k int, when string) func(op, key string) {
	var mu sync.Mutex
	n := 0
	return func(op, key string) {
		mu.Lock() // held until the kill: no other mutation gets past this point after the k-th
		n++
		if n < k {
			mu.Unlock()
			return
		}
		fmt.Fprintf(os.Stderr, "%s SIGKILL %s mutation %d (%s %s)\n", CrashMarker, when, n, op, key)
		_ = syscall.Kill(os.Getpid(), syscall.SIGKILL)
		select {} // the signal ends the process
	}
}
