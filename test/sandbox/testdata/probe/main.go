// Command probe reports what a program sees inside a sandbox: its ids, its PID and its parent's, and whether it
// can write and read the paths it is given. It is built static and placed in a test image root.
//
//	probe [--write PATH]... [--read PATH]... [--sleep DURATION]
//
// Each line of output is "NAME: VALUE"; write and read print "ok"/the content or the error.
package main

import (
	"flag"
	"fmt"
	"os"
	"strings"
	"time"
)

type list []string

func (l *list) String() string     { return strings.Join(*l, ",") }
func (l *list) Set(s string) error { *l = append(*l, s); return nil }

func main() {
	var writes, reads list
	flag.Var(&writes, "write", "path to write (repeatable)")
	flag.Var(&reads, "read", "path to read (repeatable)")
	sleep := flag.Duration("sleep", 0, "time to wait before exiting")
	flag.Parse()
	groups, _ := os.Getgroups()
	fmt.Printf("uid: %d\ngid: %d\ngroups: %v\npid: %d\nppid: %d\n", os.Getuid(), os.Getgid(), groups, os.Getpid(), os.Getppid())
	fmt.Printf("env: %s\n", strings.Join(os.Environ(), " "))
	for _, p := range writes {
		if err := os.WriteFile(p, []byte("probe"), 0o644); err != nil {
			fmt.Printf("write %s: %v\n", p, err)
		} else {
			fmt.Printf("write %s: ok\n", p)
		}
	}
	for _, p := range reads {
		b, err := os.ReadFile(p)
		if err != nil {
			fmt.Printf("read %s: %v\n", p, err)
		} else {
			fmt.Printf("read %s: %s\n", p, b)
		}
	}
	time.Sleep(*sleep)
}
