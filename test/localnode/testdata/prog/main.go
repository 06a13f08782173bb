// Command prog is the test program localnode runs in place of an image in the end-to-end tests.
//
// It reads a JSON config file (mounted from a ConfigMap), writes a line into its scratch
// directory, records its PID under --pid-dir (a hostPath) and writes a termination message
// naming its completion index, the config's depot and its exit code. The exit code comes from
// the config: "exit" maps an index to a code on every attempt, "firstAttempt" maps an index to
// a code used only while INDEX_FAILURES (the Job controller's per-index failure count) is 0 or
// unset. With --sleep it waits that long before exiting (SIGTERM ends it at once unless
// --ignore-sigterm); --report-env adds the named variables to the message.
package main

import (
	"encoding/json"
	"flag"
	"fmt"
	"os"
	"os/signal"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"time"
)

type config struct {
	Depot        string         `json:"depot"`
	Exit         map[string]int `json:"exit"`
	FirstAttempt map[string]int `json:"firstAttempt"`
}

func main() {
	configPath := flag.String("config", "", "JSON config file")
	messagePath := flag.String("termination-log", "", "file the termination message is written to")
	scratch := flag.String("scratch", "", "directory to write a scratch file into")
	pidDir := flag.String("pid-dir", "", "directory to record the PID in (file named after $POD_NAME)")
	sleep := flag.Duration("sleep", 0, "time to wait before exiting")
	reportEnv := flag.String("report-env", "", "comma-separated env names whose values are added to the message")
	ignoreTerm := flag.Bool("ignore-sigterm", false, "ignore SIGTERM (only SIGKILL ends the sleep)")
	flag.Parse()
	if *ignoreTerm {
		signal.Ignore(syscall.SIGTERM)
	}

	b, err := os.ReadFile(*configPath)
	if err != nil {
		fail(*messagePath, 3, err)
	}
	var c config
	if err := json.Unmarshal(b, &c); err != nil {
		fail(*messagePath, 3, err)
	}
	index := os.Getenv("JOB_COMPLETION_INDEX")
	failures, _ := strconv.Atoi(os.Getenv("INDEX_FAILURES"))
	code := c.Exit[index]
	if v, ok := c.FirstAttempt[index]; ok && failures == 0 {
		code = v
	}
	if *scratch != "" {
		if err := os.WriteFile(filepath.Join(*scratch, "index-"+index), []byte(c.Depot), 0o644); err != nil {
			fail(*messagePath, 3, err)
		}
	}
	if *pidDir != "" {
		if err := os.WriteFile(filepath.Join(*pidDir, os.Getenv("POD_NAME")+".pid"), []byte(strconv.Itoa(os.Getpid())), 0o644); err != nil {
			fail(*messagePath, 3, err)
		}
	}
	fmt.Printf("prog: index %s, failures %d, exit %d\n", index, failures, code)
	time.Sleep(*sleep)
	msg := fmt.Sprintf("index=%s depot=%s failures=%d exit=%d", index, c.Depot, failures, code)
	for _, name := range strings.Split(*reportEnv, ",") {
		if name != "" {
			msg += fmt.Sprintf(" %s=%s", name, os.Getenv(name))
		}
	}
	if err := os.WriteFile(*messagePath, []byte(msg), 0o644); err != nil {
		fail("", 3, err)
	}
	os.Exit(code)
}

func fail(messagePath string, code int, err error) {
	fmt.Fprintln(os.Stderr, "prog:", err)
	if messagePath != "" {
		_ = os.WriteFile(messagePath, []byte(err.Error()), 0o644)
	}
	os.Exit(code)
}
