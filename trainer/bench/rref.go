package bench

import (
	"bufio"
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
)

// ErrNoR is returned by ReferenceR when Rscript or the forecast package is not installed.
var ErrNoR = errors.New("bench: Rscript with the forecast package is not installed")

// rScript fits forecast::ets and forecast::thetaf (R package forecast, Hyndman & Khandakar 2008)
// to every series in one R process, timing each method with proc.time() (user + system), and
// writes the forecasts as method,series,step,value and the times as method,cpu_seconds,series.
const rScript = `
suppressPackageStartupMessages(library(forecast))
args <- commandArgs(trailingOnly = TRUE)
inp <- readLines(args[1])
fc <- file(args[2], "w"); tm <- file(args[3], "w")
cpu <- c(ets = 0, thetaf = 0); failed <- c(ets = 0, thetaf = 0)
now <- function() { p <- proc.time(); p[[1]] + p[[2]] }
for (line in inp) {
  f <- strsplit(line, ",")[[1]]
  id <- f[1]; fr <- as.integer(f[2]); h <- as.integer(f[3])
  x <- ts(as.numeric(strsplit(f[4], " ")[[1]]), frequency = fr)
  for (m in c("ets", "thetaf")) {
    t0 <- now()
    y <- tryCatch(if (m == "ets") forecast(ets(x), h = h)$mean else thetaf(x, h = h)$mean,
                  error = function(e) { failed[m] <<- failed[m] + 1; rep(x[length(x)], h) })
    cpu[m] <- cpu[m] + now() - t0
    writeLines(paste(m, id, seq_len(h), format(as.numeric(y), digits = 17), sep = ","), fc)
  }
}
for (m in names(cpu)) writeLines(paste(m, cpu[[m]], length(inp), failed[[m]], sep = ","), tm)
close(fc); close(tm)
`

// ReferenceR runs R's ets and thetaf on the entries (see rScript) and scores their forecasts
// with Accuracy, so the figures compare with ours one to one. CPUMilliseconds is R's own
// per-series CPU time for the method, excluding R's start-up. It writes a note to w and
// returns ErrNoR when R is not available.
func ReferenceR(ctx context.Context, entries []Entry, w io.Writer) ([]*Report, error) {
	rs, err := exec.LookPath("Rscript")
	if err != nil || exec.CommandContext(ctx, rs, "-e", `quit(status = !requireNamespace("forecast", quietly = TRUE))`).Run() != nil {
		fmt.Fprintln(w, "reference-r: skipped (Rscript with the forecast package not found)")
		return nil, nil
	}
	tmp, err := os.MkdirTemp("", "almanac-bench-r")
	if err != nil {
		return nil, err
	}
	defer os.RemoveAll(tmp)
	in, script := filepath.Join(tmp, "in.csv"), filepath.Join(tmp, "ref.R")
	fcPath, tmPath := filepath.Join(tmp, "fc.csv"), filepath.Join(tmp, "times.csv")
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
	cmd := exec.CommandContext(ctx, rs, "--vanilla", script, in, fcPath, tmPath)
	if out, err := cmd.CombinedOutput(); err != nil {
		return nil, fmt.Errorf("Rscript: %v: %s", err, out)
	}
	byID := map[string]int{}
	for i, e := range entries {
		byID[e.ID] = i
	}
	fcs := map[string][][]float64{}
	f, err := os.Open(fcPath)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	sc := bufio.NewScanner(f)
	for line := 1; sc.Scan(); line++ {
		p := strings.Split(sc.Text(), ",")
		if len(p) != 4 {
			return nil, fmt.Errorf("%s:%d: %d fields, want 4", fcPath, line, len(p))
		}
		i, ok := byID[p[1]]
		v, err := strconv.ParseFloat(strings.TrimSpace(p[3]), 64)
		if !ok || err != nil {
			return nil, fmt.Errorf("%s:%d: bad series or value %q", fcPath, line, sc.Text())
		}
		if fcs[p[0]] == nil {
			fcs[p[0]] = make([][]float64, len(entries))
		}
		fcs[p[0]][i] = append(fcs[p[0]][i], v)
	}
	if err := sc.Err(); err != nil {
		return nil, err
	}
	times, err := os.ReadFile(tmPath)
	if err != nil {
		return nil, err
	}
	var out []*Report
	for _, line := range strings.Split(strings.TrimSpace(string(times)), "\n") {
		p := strings.Split(line, ",")
		if len(p) != 4 {
			return nil, fmt.Errorf("%s: bad line %q", tmPath, line)
		}
		sec, _ := strconv.ParseFloat(p[1], 64)
		failed, _ := strconv.Atoi(p[3])
		r := newReport("R forecast::" + p[0])
		for i, e := range entries {
			if len(fcs[p[0]][i]) != e.Horizon {
				return nil, fmt.Errorf("R %s: series %s has %d steps, want %d", p[0], e.ID, len(fcs[p[0]][i]), e.Horizon)
			}
			r.add(e, fcs[p[0]][i])
		}
		r.All.Failed = failed
		r.All.CPUMilliseconds = 1000 * sec / float64(len(entries))
		out = append(out, r)
	}
	return out, nil
}
