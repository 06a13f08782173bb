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
	v := os.Getenv(CrashAfterWritesEnv)
	if v == "" {
		return
	}
	k, err := strconv.Atoi(v)
	if err != nil || k < 1 {
		fmt.Fprintf(os.Stderr, "%s %s=%q is not a count >= 1\n", CrashMarker, CrashAfterWritesEnv, v)
		os.Exit(2)
	}
	var mu sync.Mutex
	n := 0
	afterCommit = func(op, key string) {
		mu.Lock() // held until the kill: no other mutation commits after the k-th
		n++
		if n < k {
			mu.Unlock()
			return
		}
		fmt.Fprintf(os.Stderr, "%s SIGKILL after committed mutation %d (%s %s)\n", CrashMarker, n, op, key)
		_ = syscall.Kill(os.Getpid(), syscall.SIGKILL)
		select {} // the signal ends the process
	}
}
