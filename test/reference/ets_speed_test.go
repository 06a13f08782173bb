package reference

import (
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"almanac.dev/almanac/trainer/models"
)

// etsSpeedR times R forecast 8.20's ets(x) on every series of its input file in one R process,
// with proc.time() (user + system CPU) around each call, so R's start-up is excluded. It
// writes "form,<id>,<E,T,S>" per series and "cpu,<seconds>" at the end.
const etsSpeedR = `
suppressPackageStartupMessages(library(forecast))
args <- commandArgs(trailingOnly = TRUE)
inp <- readLines(args[1]); out <- file(args[2], "w")
cpu <- 0
now <- function() { p <- proc.time(); p[[1]] + p[[2]] }
for (line in inp) {
  f <- strsplit(line, ",")[[1]]
  x <- ts(as.numeric(strsplit(f[2], " ")[[1]]), frequency = 12)
  t0 <- now(); fit <- ets(x); cpu <- cpu + now() - t0
  c <- fit$components
  writeLines(paste("form", f[1], paste(c[1], if (c[4] == "TRUE") "Ad" else c[2], c[3]), sep = ","), out)
}
writeLines(paste("cpu", cpu, sep = ","), out); close(out)
`

// BenchmarkETSSelectionVsR times SelectETS per M3 monthly series (Makridakis & Hibon 2000; the
// first arimaSpeedSeries() of them, every arimaSpeedEvery()-th, the same env settings as the
// ARIMA benchmark) and, in the same run and on the same series, R forecast 8.20's ets (CPU time
// inside one R process, start-up excluded). It reports cpu-ns/series (ours, process CPU time),
// R-ms/series, speedup (R CPU time / ours) and agree-% (same ETS form as R). Run it with
// GOMAXPROCS=1:
//
//	GOMAXPROCS=1 go test ./test/reference -run '^$' -bench ETSSelectionVsR -benchtime 1x
//
// It skips without the M3 data or Rscript.
func BenchmarkETSSelectionVsR(b *testing.B) {
	entries := m3Monthly(b, arimaSpeedSeries(), arimaSpeedEvery())
	rs, err := exec.LookPath("Rscript")
	if err != nil {
		b.Skipf("Rscript not available: %v", err)
	}
	dir := b.TempDir()
	var sb strings.Builder
	for _, e := range entries {
		vals := make([]string, len(e.Train))
		for i, v := range e.Train {
			vals[i] = strconv.FormatFloat(v, 'g', -1, 64)
		}
		fmt.Fprintf(&sb, "%s,%s\n", e.ID, strings.Join(vals, " "))
	}
	in, script, out := filepath.Join(dir, "in.csv"), filepath.Join(dir, "ets.R"), filepath.Join(dir, "out.csv")
	if err := os.WriteFile(in, []byte(sb.String()), 0o600); err != nil {
		b.Fatal(err)
	}
	if err := os.WriteFile(script, []byte(etsSpeedR), 0o600); err != nil {
		b.Fatal(err)
	}
	cmd := exec.Command(rs, script, in, out)
	cmd.Env = append(os.Environ(), "OPENBLAS_NUM_THREADS=1", "OMP_NUM_THREADS=1")
	if o, err := cmd.CombinedOutput(); err != nil {
		b.Fatalf("Rscript: %v: %s", err, o)
	}
	text, err := os.ReadFile(out)
	if err != nil {
		b.Fatal(err)
	}
	forms, rSeconds := map[string]string{}, 0.0
	for _, line := range strings.Split(strings.TrimSpace(string(text)), "\n") {
		p := strings.Split(line, ",")
		switch {
		case p[0] == "form" && len(p) == 3:
			forms[p[1]] = "ETS(" + strings.ReplaceAll(p[2], " ", ",") + ")"
		case p[0] == "cpu" && len(p) == 2:
			rSeconds, err = strconv.ParseFloat(p[1], 64)
			if err != nil {
				b.Fatalf("%s: %q: %v", out, line, err)
			}
		}
	}
	if len(forms) != len(entries) {
		b.Fatalf("R returned %d forms for %d series", len(forms), len(entries))
	}
	b.ResetTimer()
	agree := 0
	cpu0 := processCPU()
	for b.Loop() {
		agree = 0
		for _, e := range entries {
			fit, err := models.SelectETS(e.Train, 12, nil)
			if err != nil {
				b.Fatalf("%s: %v", e.ID, err)
			}
			if fit.Name() == forms[e.ID] {
				agree++
			}
		}
	}
	per := float64((processCPU() - cpu0).Nanoseconds()) / float64(b.N) / float64(len(entries))
	rPer := rSeconds / float64(len(entries))
	b.ReportMetric(per, "cpu-ns/series")
	b.ReportMetric(rPer*1e3, "R-ms/series")
	b.ReportMetric(rPer*1e9/per, "speedup")
	b.ReportMetric(100*float64(agree)/float64(len(entries)), "agree-%")
}
