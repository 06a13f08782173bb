package reference

import (
	"bufio"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/bench"
	"almanac.dev/almanac/trainer/models"
)

// arimaSpeedR times R forecast's auto.arima(x) on every series of its input file in one R
// process, with proc.time() (user + system CPU) around each call so R's start-up is excluded.
// It writes one line per series as soon as it is done (flushed, so a stopped run leaves the
// completed prefix: "order,<id>,<p d q P D Q>,<cpu seconds>") and the total at the end
// ("cpu,<seconds>").
const arimaSpeedR = `
suppressPackageStartupMessages(library(forecast))
args <- commandArgs(trailingOnly = TRUE)
inp <- readLines(args[1]); out <- file(args[2], "w")
cpu <- 0
now <- function() { p <- proc.time(); p[[1]] + p[[2]] }
for (line in inp) {
  f <- strsplit(line, ",")[[1]]
  x <- ts(as.numeric(strsplit(f[2], " ")[[1]]), frequency = 12)
  t0 <- now(); fit <- auto.arima(x); dt <- now() - t0; cpu <- cpu + dt
  a <- fit$arma
  writeLines(paste("order", f[1], paste(a[c(1, 6, 2, 3, 7, 4)], collapse = " "), dt, sep = ","), out)
  flush(out)
}
writeLines(paste("cpu", cpu, sep = ","), out); close(out)
`

// arimaSpeedSeries is how many M3 monthly series the speed benchmark uses (env
// ALMANAC_ARIMA_SPEED_SERIES overrides; 0 means all 1428).
func arimaSpeedSeries() int {
	if v, err := strconv.Atoi(os.Getenv("ALMANAC_ARIMA_SPEED_SERIES")); err == nil {
		return v
	}
	return 100
}

// arimaSpeedEvery is the spread of the sample (env ALMANAC_ARIMA_SPEED_EVERY=k takes every
// k-th M3 monthly series, the 1st, (k+1)th, ...; default 1). With k > 1 the series limit
// applies to the spread sample.
func arimaSpeedEvery() int {
	if v, err := strconv.Atoi(os.Getenv("ALMANAC_ARIMA_SPEED_EVERY")); err == nil && v > 1 {
		return v
	}
	return 1
}

var arimaRSpeed struct {
	once    sync.Once
	seconds float64 // R CPU seconds per series
	orders  map[string]string
	err     error
}

// m3Monthly loads every k-th M3 monthly training series, at most limit of them (limit <= 0: no
// limit; skips without the data set).
func m3Monthly(tb testing.TB, limit, every int) []bench.Entry {
	dir := os.Getenv(bench.EnvM3Dir)
	if dir == "" {
		dir = filepath.Join("..", "..", "..", "shared", "datasets", "m3")
	}
	all, err := bench.Load(dir, 0)
	if err != nil {
		tb.Skipf("M3 data not available: %v", err)
	}
	var out []bench.Entry
	i := 0
	for _, e := range all {
		if e.Category != "MONTHLY" {
			continue
		}
		if i%every == 0 && (limit <= 0 || len(out) < limit) {
			out = append(out, e)
		}
		i++
	}
	return out
}

// runRSpeed times auto.arima on the entries once per test binary. R's input, script and
// per-series output go to a temporary directory, or to the directory named by env
// ALMANAC_ARIMA_SPEED_DIR, which is kept (to watch a long run, or read the completed prefix of
// a stopped one).
//
// With env ALMANAC_ARIMA_SPEED_R_RESULTS=<out.csv of an earlier run> R is not run and that
// file's results are used instead (to compare a changed selection with R's orders without
// waiting for R again; the speedup then compares CPU times measured in two runs).
func runRSpeed(b *testing.B, entries []bench.Entry) {
	arimaRSpeed.once.Do(func() {
		if p := os.Getenv("ALMANAC_ARIMA_SPEED_R_RESULTS"); p != "" {
			b.Logf("R results read from %s, not measured in this run", p)
			arimaRSpeed.err = readRSpeed(p, entries)
			return
		}
		rs, err := exec.LookPath("Rscript")
		if err != nil {
			arimaRSpeed.err = err
			return
		}
		dir := os.Getenv("ALMANAC_ARIMA_SPEED_DIR")
		if dir == "" {
			if dir, err = os.MkdirTemp("", "almanac-arima-speed"); err != nil {
				arimaRSpeed.err = err
				return
			}
			defer os.RemoveAll(dir)
		} else if err := os.MkdirAll(dir, 0o755); err != nil {
			arimaRSpeed.err = err
			return
		}
		var sb strings.Builder
		for _, e := range entries {
			vals := make([]string, len(e.Train))
			for i, v := range e.Train {
				vals[i] = strconv.FormatFloat(v, 'g', -1, 64)
			}
			fmt.Fprintf(&sb, "%s,%s\n", e.ID, strings.Join(vals, " "))
		}
		in, script, out := filepath.Join(dir, "in.csv"), filepath.Join(dir, "speed.R"), filepath.Join(dir, "out.csv")
		if err := os.WriteFile(in, []byte(sb.String()), 0o600); err != nil {
			arimaRSpeed.err = err
			return
		}
		if err := os.WriteFile(script, []byte(arimaSpeedR), 0o600); err != nil {
			arimaRSpeed.err = err
			return
		}
		cmd := exec.Command(rs, script, in, out)
		// One BLAS thread, as our side runs with GOMAXPROCS=1.
		cmd.Env = append(os.Environ(), "OPENBLAS_NUM_THREADS=1", "OMP_NUM_THREADS=1")
		if b, err := cmd.CombinedOutput(); err != nil {
			arimaRSpeed.err = fmt.Errorf("Rscript: %v: %s", err, b)
			return
		}
		arimaRSpeed.err = readRSpeed(out, entries)
	})
}

// readRSpeed reads R's per-series results (arimaSpeedR's output) for the entries: their
// orders, and their CPU seconds summed and divided by the entry count. Every entry must have
// a result.
func readRSpeed(path string, entries []bench.Entry) error {
	f, err := os.Open(path)
	if err != nil {
		return err
	}
	defer f.Close()
	orders, cpu := map[string]string{}, map[string]float64{}
	sc := bufio.NewScanner(f)
	for line := 1; sc.Scan(); line++ {
		p := strings.Split(sc.Text(), ",")
		if p[0] != "order" {
			continue
		}
		if len(p) != 4 {
			return fmt.Errorf("%s:%d: want order,<series>,<orders>,<cpu seconds>", path, line)
		}
		v, err := strconv.ParseFloat(p[3], 64)
		if err != nil {
			return fmt.Errorf("%s:%d: cpu seconds: %v", path, line, err)
		}
		orders[p[1]], cpu[p[1]] = p[2], v
	}
	if err := sc.Err(); err != nil {
		return err
	}
	total := 0.0
	for _, e := range entries {
		v, ok := cpu[e.ID]
		if !ok {
			return fmt.Errorf("%s: no R result for series %s", path, e.ID)
		}
		total += v
	}
	arimaRSpeed.orders, arimaRSpeed.seconds = orders, total/float64(len(entries))
	return nil
}

// BenchmarkARIMASelectionVsR times SelectARIMA per M3 monthly series (Makridakis & Hibon 2000;
// the first arimaSpeedSeries() of them) and, in the same run and on the same series, R
// forecast 8.20's auto.arima (CPU time inside one R process, start-up excluded). It reports
// cpu-ns/series (ours, process CPU time), R-ms/series, speedup (R CPU time / ours) and
// agree-% (orders identical to R's, constant aside). Run it with GOMAXPROCS=1, e.g.
//
//	GOMAXPROCS=1 go test ./test/reference -run '^$' -bench ARIMASelectionVsR -benchtime 1x
//
// ALMANAC_ARIMA_SPEED_SERIES (how many; 0 all 1428), ALMANAC_ARIMA_SPEED_EVERY (every k-th),
// ALMANAC_ARIMA_SPEED_DIR (keep R's files) and ALMANAC_ARIMA_SPEED_R_RESULTS (reuse R's
// results) are described at arimaSpeedSeries, arimaSpeedEvery and runRSpeed. It skips
// without the M3 data or Rscript.
func BenchmarkARIMASelectionVsR(b *testing.B) {
	entries := m3Monthly(b, arimaSpeedSeries(), arimaSpeedEvery())
	runRSpeed(b, entries)
	if arimaRSpeed.err != nil {
		b.Skipf("R reference not available: %v", arimaRSpeed.err)
	}
	b.ResetTimer()
	agree := 0
	cpu0 := processCPU()
	for b.Loop() {
		agree = 0
		for _, e := range entries {
			fit, err := models.SelectARIMA(e.Train, 12, models.ARIMABounds{})
			if err != nil {
				b.Fatalf("%s: %v", e.ID, err)
			}
			o := fit.Order()
			if fmt.Sprintf("%d %d %d %d %d %d", o.P, o.D, o.Q, o.SP, o.SD, o.SQ) == arimaRSpeed.orders[e.ID] {
				agree++
			}
		}
	}
	// CPU time, as for R: the machine may be shared, and wall time would count the waits.
	per := float64((processCPU() - cpu0).Nanoseconds()) / float64(b.N) / float64(len(entries))
	b.ReportMetric(per, "cpu-ns/series")
	b.ReportMetric(arimaRSpeed.seconds*1e3, "R-ms/series")
	b.ReportMetric(arimaRSpeed.seconds*1e9/per, "speedup")
	b.ReportMetric(100*float64(agree)/float64(len(entries)), "agree-%")
}

// processCPU returns the process's user plus system CPU time.
func processCPU() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}
