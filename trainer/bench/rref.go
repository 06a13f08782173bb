package bench

import (
	"bufio"
	"context"
	_ "embed"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"syscall"
	"time"
)

// rNaive2 defines the R functions seasonality_test(x, p) and naive2(x, h).
//
//go:embed m4naive2.R
var rNaive2 string

// ErrNoR is returned by ReferenceR when Rscript or the forecast package is not installed.
var ErrNoR = errors.New("bench: Rscript with the forecast package is not installed")

// RMethods are the R methods ReferenceR runs when given none, each in its own R process.
var RMethods = []string{"ets", "thetaf"}

// RMethodsAll lists every method rScript knows, in the order ReferenceR reports them.
var RMethodsAll = []string{"ets", "thetaf", "auto.arima", "snaive", "naive2"}

// rScript fits one method to every series with R package forecast (Hyndman & Khandakar 2008):
// forecast(ets(x), h), thetaf(x, h), forecast(auto.arima(x), h) or snaive(x, h), x a ts of the
// entry's Frequency; "naive2" is the M4 organisers' Naive2 benchmark as m4naive2.R writes it
// out. Method "none"
// only loads the package and reads the input, so its CPU time is R's start-up cost. It writes
// series,step,value lines, and the number of failed fits (forecast by the last value) on
// stderr as "failed=N". With a level above 0 (its fourth argument, percent) the lines are
// series,step,value,lower,upper: the method's central prediction interval at that level
// (forecast's level argument; NA for naive2, which has none, and for a failed fit); the seed
// is fixed for the intervals forecast.ets simulates.
var rScript = `
suppressPackageStartupMessages(library(forecast))
args <- commandArgs(trailingOnly = TRUE)
m <- args[1]
inp <- readLines(args[2])
fc <- file(args[3], "w")
failed <- 0
lev <- if (length(args) >= 4) as.numeric(args[4]) else 0
set.seed(20261205)
` + rNaive2 + `
for (line in inp) {
  f <- strsplit(line, ",")[[1]]
  id <- f[1]; fr <- as.integer(f[2]); h <- as.integer(f[3])
  x <- ts(as.numeric(strsplit(f[4], " ")[[1]]), frequency = fr)
  if (m == "none") next
  L <- if (lev > 0) lev else 80
  y <- tryCatch(switch(m,
                  ets = forecast(ets(x), h = h, level = L),
                  thetaf = thetaf(x, h = h, level = L),
                  auto.arima = forecast(auto.arima(x), h = h, level = L),
                  snaive = snaive(x, h = h, level = L),
                  naive2 = list(mean = naive2(x, h)),
                  stop("unknown method ", m)),
                error = function(e) { failed <<- failed + 1; list(mean = rep(x[length(x)], h)) })
  v <- format(as.numeric(y$mean), digits = 17)
  if (lev > 0) {
    lo <- if (is.null(y$lower)) rep(NA, h) else as.numeric(y$lower[, 1])
    hi <- if (is.null(y$upper)) rep(NA, h) else as.numeric(y$upper[, 1])
    v <- paste(v, format(lo, digits = 17), format(hi, digits = 17), sep = ",")
  }
  writeLines(paste(id, seq_len(h), v, sep = ","), fc)
}
close(fc)
cat(sprintf("failed=%d\n", failed), file = stderr())
`

// ParseRMethods reads a comma-separated list of RMethodsAll names.
func ParseRMethods(s string) ([]string, error) {
	var out []string
	for _, m := range strings.Split(s, ",") {
		m = strings.TrimSpace(m)
		ok := false
		for _, k := range RMethodsAll {
			ok = ok || k == m
		}
		if !ok {
			return nil, fmt.Errorf("R method %q: want some of %s", m, strings.Join(RMethodsAll, ","))
		}
		out = append(out, m)
	}
	return out, nil
}

// HaveR reports whether Rscript and R's forecast package are installed.
func HaveR(ctx context.Context) bool {
	rs, err := exec.LookPath("Rscript")
	return err == nil && exec.CommandContext(ctx, rs, "-e", `quit(status = !requireNamespace("forecast", quietly = TRUE))`).Run() == nil
}

// ReferenceR runs each of methods (nil: RMethods) on the entries in its own Rscript process (see rScript) and
// scores the forecasts with Accuracy, so the figures compare with ours one to one. A report's
// CPUMilliseconds is the child's user + system CPU time (rusage of the finished process, R is
// single-threaded; BLAS threads are pinned to 1) minus that of a start-up-only child (method
// "none": loads forecast and parses the input), divided by the number of series; 0, with a
// note to w, when it is not above the start-up's (the variation of that subtraction). It writes
// a note to w and returns ErrNoR when R is not available.
func ReferenceR(ctx context.Context, entries []Entry, methods []string, w io.Writer) ([]*Report, error) {
	return ReferenceRIntervals(ctx, entries, methods, 0, w)
}

// ReferenceRIntervals is ReferenceR that also asks each method for its central prediction
// interval at level percent (0: none) and keeps the bounds in the reports' Lower and Upper
// (nil for a method that gives none, naive2), for MSIS against ours on the same series.
func ReferenceRIntervals(ctx context.Context, entries []Entry, methods []string, level float64, w io.Writer) ([]*Report, error) {
	if methods == nil {
		methods = RMethods
	}
	if !HaveR(ctx) {
		fmt.Fprintln(w, "reference-r: skipped (Rscript with the forecast package not found)")
		return nil, ErrNoR
	}
	tmp, err := os.MkdirTemp("", "almanac-bench-r")
	if err != nil {
		return nil, err
	}
	defer os.RemoveAll(tmp)
	in, script := filepath.Join(tmp, "in.csv"), filepath.Join(tmp, "ref.R")
	var b strings.Builder
	for _, e := range entries {
		vals := make([]string, len(e.Train))
		for i, v := range e.Train {
			vals[i] = strconv.FormatFloat(v, 'g', -1, 64)
		}
		fmt.Fprintf(&b, "%s,%d,%d,%s\n", e.ID, e.Frequency, e.Horizon, strings.Join(vals, " "))
	}
	if err := os.WriteFile(in, []byte(b.String()), 0o600); err != nil {
		return nil, err
	}
	if err := os.WriteFile(script, []byte(rScript), 0o600); err != nil {
		return nil, err
	}
	run := func(method string) (time.Duration, int, string, error) {
		out := filepath.Join(tmp, method+".csv")
		cmd := exec.CommandContext(ctx, "Rscript", "--vanilla", script, method, in, out, strconv.FormatFloat(level, 'g', -1, 64))
		cmd.Env = append(os.Environ(), "OMP_NUM_THREADS=1", "OPENBLAS_NUM_THREADS=1")
		// Own process group, killed whole when ctx ends (Rscript may run R as a child).
		cmd.SysProcAttr = &syscall.SysProcAttr{Setpgid: true}
		cmd.Cancel = func() error { return syscall.Kill(-cmd.Process.Pid, syscall.SIGKILL) }
		var stderr strings.Builder
		cmd.Stderr = &stderr
		if err := cmd.Run(); err != nil {
			return 0, 0, "", fmt.Errorf("Rscript %s: %v: %s", method, err, stderr.String())
		}
		ru, ok := cmd.ProcessState.SysUsage().(*syscall.Rusage)
		if !ok {
			return 0, 0, "", errors.New("no rusage for the R child")
		}
		failed := 0
		if i := strings.LastIndex(stderr.String(), "failed="); i >= 0 {
			failed, _ = strconv.Atoi(strings.TrimSpace(stderr.String()[i+len("failed="):]))
		}
		return time.Duration(ru.Utime.Nano() + ru.Stime.Nano()), failed, out, nil
	}
	base, _, _, err := run("none")
	if err != nil {
		return nil, err
	}
	fmt.Fprintf(w, "reference-r: R start-up and input parsing %.0f ms CPU (subtracted)\n", float64(base.Microseconds())/1000)
	if fs := seasonsAtOne(entries); len(fs) > 0 && slices.Contains(methods, "snaive") {
		fmt.Fprintf(w, "reference-r: snaive runs at ts frequency 1 on the %s series (the M4 convention, M4Period), where it is the naive forecast\n", strings.Join(fs, " and "))
	}
	byID := map[string]int{}
	for i, e := range entries {
		byID[e.ID] = i
	}
	var reps []*Report
	for _, method := range methods {
		cpu, failed, path, err := run(method)
		if err != nil {
			return nil, err
		}
		fcs, lower, upper, err := readRForecasts(path, byID, len(entries))
		if err != nil {
			return nil, err
		}
		r := newReport(rReportName(method, entries))
		for i, e := range entries {
			if len(fcs[i]) != e.Horizon {
				return nil, fmt.Errorf("R %s: series %s has %d steps, want %d", method, e.ID, len(fcs[i]), e.Horizon)
			}
			r.add(e, fcs[i])
		}
		r.All.Failed = failed
		r.Forecasts = fcs
		if level > 0 && method != "naive2" {
			r.Lower, r.Upper = lower, upper
		}
		if cpu <= base {
			// A method cheaper than the start-up's run-to-run variation (a few series, a
			// naive forecast) would read negative; it reads 0 and its CPU ratio is not given.
			fmt.Fprintf(w, "reference-r: %s took %.0f ms CPU, no more than the start-up run: its CPU per series reads 0\n", method, float64(cpu.Microseconds())/1000)
			cpu = base
		}
		if len(entries) > 0 {
			r.All.CPUMilliseconds = float64((cpu - base).Microseconds()) / 1000 / float64(len(entries))
		}
		reps = append(reps, r)
	}
	return reps, nil
}

// rReportName names R's report of method on entries. snaive runs at the entry's Frequency,
// 1 for weekly and daily data (M4Period), where the seasonal naive forecast is the naive one,
// and is named so when any entry is such (seasonsAtOne).
func rReportName(method string, entries []Entry) string {
	switch {
	case method == "naive2":
		return "R naive2 (M4 definition)"
	case method == "snaive" && len(seasonsAtOne(entries)) > 0:
		return "R snaive at m = 1 (naive)"
	}
	return "R forecast::" + method
}

// seasonsAtOne lists, in first appearance order, the frequencies of the entries that R gets
// as a ts of frequency 1 although the engine's season is longer (Weekly, Daily: M4Period).
func seasonsAtOne(entries []Entry) []string {
	var out []string
	for _, e := range entries {
		if e.Frequency == 1 && e.Freq != "" && e.Freq.SeasonLength() > 1 && !slices.Contains(out, string(e.Freq)) {
			out = append(out, string(e.Freq))
		}
	}
	return out
}

// readRForecasts reads series,step,value lines into one path per entry, or
// series,step,value,lower,upper lines into the paths and the interval's bounds (NA reads NaN:
// no interval); every line of a file has the same fields.
func readRForecasts(path string, byID map[string]int, n int) (mean, lower, upper [][]float64, err error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, nil, nil, err
	}
	defer f.Close()
	mean = make([][]float64, n)
	sc := bufio.NewScanner(f)
	fields := 0
	for line := 1; sc.Scan(); line++ {
		p := strings.Split(sc.Text(), ",")
		if fields == 0 && (len(p) == 3 || len(p) == 5) {
			fields = len(p)
			if fields == 5 {
				lower, upper = make([][]float64, n), make([][]float64, n)
			}
		}
		if len(p) != fields {
			return nil, nil, nil, fmt.Errorf("%s:%d: %d fields, want 3 (series,step,value) or 5 (and lower,upper) on every line", path, line, len(p))
		}
		var v [3]float64
		i, ok := byID[p[0]]
		for k := 2; k < fields; k++ {
			s := strings.TrimSpace(p[k])
			if k > 2 && s == "NA" {
				v[k-2] = math.NaN()
				continue
			}
			if v[k-2], err = strconv.ParseFloat(s, 64); err != nil {
				ok = false
			}
		}
		if !ok {
			return nil, nil, nil, fmt.Errorf("%s:%d: bad series or value %q", path, line, sc.Text())
		}
		mean[i] = append(mean[i], v[0])
		if fields == 5 {
			lower[i], upper[i] = append(lower[i], v[1]), append(upper[i], v[2])
		}
	}
	return mean, lower, upper, sc.Err()
}
