package main

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	"almanac.dev/almanac/test/s3test"
	"almanac.dev/almanac/trainer/exitcode"
	"almanac.dev/almanac/trainer/summary"
	"almanac.dev/almanac/trainer/synth"
)

// TestMain lets the test binary stand in for the trainer: with ALMANAC_TRAINER_PROCESS set it
// runs main() on its arguments (after "--"), so the table below sees real exit statuses.
// ALMANAC_TRAINER_PANIC makes the clock panic, a panic inside plan.
func TestMain(m *testing.M) {
	if os.Getenv("ALMANAC_TRAINER_PROCESS") != "" {
		if os.Getenv("ALMANAC_TRAINER_PANIC") != "" {
			clock = func() time.Time { panic("the clock broke") }
		}
		for i, a := range os.Args {
			if a == "--" {
				os.Args = append([]string{os.Args[0]}, os.Args[i+1:]...)
				break
			}
		}
		main()
	}
	os.Exit(m.Run())
}

// trainerProcess runs the trainer as a child process and returns its exit status and the
// summary it wrote to its termination log.
func trainerProcess(t *testing.T, env []string, args ...string) (int, summary.Summary, string) {
	t.Helper()
	term := filepath.Join(t.TempDir(), "termination-log")
	cmd := exec.Command(os.Args[0], append([]string{"-test.run=^$", "--", args[0], "--termination-log", term}, args[1:]...)...)
	cmd.Env = append(append(os.Environ(), "ALMANAC_TRAINER_PROCESS=1"), env...)
	var stderr bytes.Buffer
	cmd.Stderr = &stderr
	err := cmd.Run()
	code := 0
	var ee *exec.ExitError
	if errors.As(err, &ee) {
		code = ee.ExitCode()
	} else if err != nil {
		t.Fatal(err)
	}
	b, rerr := os.ReadFile(term)
	if rerr != nil {
		t.Fatalf("exit %d and no termination log: %v\nstderr:\n%s", code, rerr, stderr.String())
	}
	s, derr := summary.Decode(b)
	if derr != nil {
		t.Fatalf("exit %d, termination log %s: %v", code, b, derr)
	}
	return code, s, stderr.String()
}

// dailyCSV is a Fenwick Lane Provisions history (invented): items x 60 days ending yesterday.
// The trainer processes take the real clock as their cutoff, so a fixed end date would find
// the whole 7-day forecast past (every series rejected as stale) once the calendar passed it.
func dailyCSV(items ...string) []byte {
	var b bytes.Buffer
	b.WriteString("item,date,value\n")
	end := synth.LastComplete(synth.Daily, time.Now())
	for n, item := range items {
		for d := 59; d >= 0; d-- {
			day := end.AddDate(0, 0, -d)
			fmt.Fprintf(&b, "%s,%s,%d\n", item, day.Format("2006-01-02"), 10+n+3*int(day.Weekday())+d%5)
		}
	}
	return b.Bytes()
}

// Issue 18 case 3: the exit code and summary of every condition the audit found, through the
// process (os.Exit included). The documented codes are in usage() and trainer/exitcode.
func TestExitCodeOfEveryCondition(t *testing.T) {
	localArgs := func(in, out, run string, extra ...string) []string {
		return append([]string{"local", "--input", in, "--output", out, "--run", run, "--series", "item", "--horizon", "7",
			"--models", "Naive,SeasonalNaive", "--design", "Fixed"}, extra...)
	}
	// published makes an input folder and an output with one published run r1.
	published := func(t *testing.T) (in, out string) {
		dir := t.TempDir()
		in, out = "file://"+dir+"/in/", "file://"+dir+"/out/"
		os.MkdirAll(dir+"/in", 0o755)
		if err := os.WriteFile(dir+"/in/depot-ashby.csv", dailyCSV("FLP-OATS-1KG", "FLP-TEA-80", "FLP-JAM-340"), 0o644); err != nil {
			t.Fatal(err)
		}
		if code, s, stderr := trainerProcess(t, nil, localArgs(in, out, "r1")...); code != 0 {
			t.Fatalf("first run: exit %d %+v\n%s", code, s, stderr)
		}
		return in, out
	}
	path := func(uri string) string { return strings.TrimPrefix(uri, "file://") }
	tests := []struct {
		name string
		args func(t *testing.T) []string
		env  []string
		code int
		want string
	}{
		{"a clean second run", func(t *testing.T) []string {
			in, out := published(t)
			return localArgs(in, out, "r2")
		}, nil, exitcode.OK, ""},
		{"a panic inside plan", func(t *testing.T) []string {
			in, out := published(t)
			return localArgs(in, out, "r2")
		}, []string{"ALMANAC_TRAINER_PANIC=1"}, exitcode.Internal, "internal error (a bug): panic: the clock broke"},
		{"a missing input folder", func(t *testing.T) []string {
			_, out := published(t)
			return localArgs("file://"+t.TempDir()+"/nowhere/", out, "r2")
		}, nil, exitcode.Config, "nowhere"}, // the portfolio names input that is not there (issue 17)
		{"a symlink loop in the input", func(t *testing.T) []string {
			in, out := published(t)
			os.Symlink("loop.csv", path(in)+"loop.csv")
			return localArgs(in, out, "r2")
		}, nil, exitcode.Data, "loop.csv"},
		{"an output URI on a file", func(t *testing.T) []string {
			in, _ := published(t)
			f := filepath.Join(t.TempDir(), "forecasts.txt")
			os.WriteFile(f, nil, 0o644)
			return localArgs(in, "file://"+f+"/", "r2")
		}, nil, exitcode.Config, "not a directory"},
		{"a damaged latest.json (repaired from the manifest chain)", func(t *testing.T) []string {
			in, out := published(t)
			os.WriteFile(path(out)+"latest.json", []byte("{\"run\": \"r1\", "), 0o644)
			return localArgs(in, out, "r2")
		}, nil, exitcode.OK, ""},
		{"a manifest that does not match latest.json's checksum (repaired)", func(t *testing.T) []string {
			in, out := published(t)
			f, _ := os.OpenFile(path(out)+"runs/r1/MANIFEST.json", os.O_APPEND|os.O_WRONLY, 0)
			f.WriteString(" ")
			f.Close()
			return localArgs(in, out, "r2")
		}, nil, exitcode.OK, ""},
		{"latest.json naming a run without a manifest (removed: a first run)", func(t *testing.T) []string {
			in, out := published(t)
			os.Remove(path(out) + "runs/r1/MANIFEST.json")
			return localArgs(in, out, "r2")
		}, nil, exitcode.OK, ""},
		{"a horizon that would exhaust memory", func(t *testing.T) []string {
			_, out := published(t)
			// r1's own configuration, as the trainer wrote it, with another run and horizon.
			var cfg map[string]any
			b, err := os.ReadFile(path(out) + "runs/r1/config.json")
			if err == nil {
				err = json.Unmarshal(b, &cfg)
			}
			if err != nil {
				t.Fatal(err)
			}
			cfg["run"], cfg["horizon"] = "r2", 2000000000
			b, _ = json.Marshal(cfg)
			f := filepath.Join(t.TempDir(), "config.json")
			os.WriteFile(f, b, 0o644)
			return []string{"plan", "--config", f}
		}, nil, exitcode.Config, "horizon: must be <= 10000"},
		{"an unreadable input folder", func(t *testing.T) []string {
			if os.Geteuid() == 0 {
				t.Skip("root reads any folder")
			}
			in, out := published(t)
			os.Chmod(path(in), 0)
			t.Cleanup(func() { os.Chmod(path(in), 0o755) })
			return localArgs(in, out, "r2")
		}, nil, exitcode.Config, "permission denied"},
		{"an S3 endpoint that accepts and never answers", func(t *testing.T) []string {
			_, out := published(t)
			return localArgs(s3test.SilentURI(t, "flp-exports", "daily/"), out, "r2", "--request-timeout", "300ms")
		}, nil, exitcode.Transient, "no answer within 300ms"},
		{"an input object that never answers (a named pipe nobody writes)", func(t *testing.T) []string {
			in, out := published(t)
			if err := syscall.Mkfifo(path(in)+"depot-brill.csv", 0o644); err != nil {
				t.Skip("no named pipes here:", err)
			}
			return localArgs(in, out, "r2", "--step-timeout", "1s")
		}, nil, exitcode.Transient, "did not finish within --step-timeout 1s"},
		// The controller passes --step-deadline (its Job's activeDeadlineSeconds less a margin):
		// a stalled step ends with a summary at that time, not at the Job controller's kill.
		{"an input object that never answers, past --step-deadline", func(t *testing.T) []string {
			in, out := published(t)
			if err := syscall.Mkfifo(path(in)+"depot-brill.csv", 0o644); err != nil {
				t.Skip("no named pipes here:", err)
			}
			return localArgs(in, out, "r2", "--step-deadline", time.Now().Add(2*time.Second).UTC().Format(time.RFC3339))
		}, nil, exitcode.Transient, "did not finish within --step-deadline "},
		{"a step that starts after its --step-deadline", func(t *testing.T) []string {
			in, out := published(t)
			return localArgs(in, out, "r2", "--step-deadline", "2000-01-01T00:00:00Z")
		}, nil, exitcode.Transient, "did not finish within --step-deadline 2000-01-01T00:00:00Z"},
		{"an input object broken at plan (UTF-16; isolated, the run goes on)", func(t *testing.T) []string {
			in, out := published(t)
			utf16 := []byte{}
			for _, c := range string(dailyCSV("FLP-RYE-500")) {
				utf16 = append(utf16, byte(c), 0)
			}
			os.WriteFile(path(in)+"depot-brill.csv", utf16, 0o644)
			return localArgs(in, out, "r2", "--partitioning", "Objects")
		}, nil, exitcode.OK, ""},
		{"a 100 KB key cell (the series rejected naming it, the run goes on)", func(t *testing.T) []string {
			in, out := published(t)
			os.WriteFile(path(in)+"depot-brill.csv", dailyCSV("FLP-"+strings.Repeat("RYE", 33_000), "FLP-RYE-500", "FLP-RYE-800", "FLP-BRAN-250", "FLP-BRAN-500"), 0o644)
			return localArgs(in, out, "r2")
		}, nil, exitcode.OK, ""},
		{"every input object broken (an empty export)", func(t *testing.T) []string {
			in, out := published(t)
			os.WriteFile(path(in)+"depot-ashby.csv", nil, 0o644)
			return localArgs(in, out, "r2")
		}, nil, exitcode.Data, "every input object is broken; the first: "},
		{"a run that lost its series (read as monthly)", func(t *testing.T) []string {
			in, out := published(t)
			return localArgs(in, out, "r2", "--frequency", "Monthly")
		}, nil, exitcode.Refused, "0 of 3 planned series forecast"},
	}
	// brokenIn holds what a row's summary must name as broken input.
	brokenIn := map[string]string{"an input object broken at plan (UTF-16; isolated, the run goes on)": "depot-brill.csv (at plan: "}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			code, s, stderr := trainerProcess(t, tc.env, tc.args(t)...)
			if code != tc.code || !strings.Contains(s.Error, tc.want) || (tc.want == "") != (s.Error == "") || !strings.Contains(s.Broken, brokenIn[tc.name]) {
				t.Fatalf("exit %d, summary error %q, broken %q; want exit %d, an error with %q, broken %q\nstderr:\n%s",
					code, s.Error, s.Broken, tc.code, tc.want, brokenIn[tc.name], stderr)
			}
		})
	}
}
