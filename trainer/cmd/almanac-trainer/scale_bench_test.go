package main

import (
	"context"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
	"syscall"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/store"
	"almanac.dev/almanac/trainer/synth"
)

// BenchmarkLocalScale runs `almanac-trainer local` as a subprocess on generated Fenwick Lane
// Provisions data, two years of daily history per series, 5,000 items per depot object, one
// depot per shard (source.partitioning object, 5,000 series per shard), zoo Naive,
// SeasonalNaive, Theta (a fast zoo: ETS would dominate the time). The 10k-series case is the
// reference measured in the same run; the 100k case has 10x the input and the same shard
// size, so its peak RSS should stay close to the reference (memory grows with the shard, not
// the file). Reported per case: end-to-end series/s, fitting series/s, peak RSS (the child's
// getrusage ru_maxrss) and input size. Run with
//
//	go test -run '^$' -bench BenchmarkLocalScale -benchtime 1x -timeout 60m ./trainer/cmd/almanac-trainer
func BenchmarkLocalScale(b *testing.B) {
	bin := filepath.Join(b.TempDir(), "almanac-trainer")
	if out, err := exec.Command("go", "build", "-o", bin, ".").CombinedOutput(); err != nil {
		b.Fatalf("go build: %v\n%s", err, out)
	}
	var refRSS, refRate float64
	for _, depots := range []int{2, 20} {
		series := depots * 5000
		b.Run(fmt.Sprintf("series=%d", series), func(b *testing.B) {
			dir := b.TempDir()
			st, err := store.Open(context.Background(), "file://"+dir+"/in")
			if err != nil {
				b.Fatal(err)
			}
			o := synth.Options{Items: 5000, Depots: depots, Periods: 730, SpareShare: 0.1, Seed: 1}
			if _, err := o.Write(context.Background(), st, "", synth.CSV); err != nil {
				b.Fatal(err)
			}
			st.Close()
			var input int64
			objs, _ := filepath.Glob(dir + "/in/*.csv")
			for _, p := range objs {
				if fi, err := os.Stat(p); err == nil {
					input += fi.Size()
				}
			}
			b.ResetTimer()
			for i := 0; i < b.N; i++ {
				cmd := exec.Command(bin, "local", "--input", "file://"+dir+"/in/", "--output", "file://"+dir+fmt.Sprintf("/out%d", i),
					"--series", "item,depot", "--value", "units", "--covariates", "promo_flag", "--models", "Naive,SeasonalNaive,Theta",
					"--horizon", "14", "--partitioning", "Objects", "--target-series-per-shard", "5000", "--run", "bench")
				start := time.Now()
				out, err := cmd.CombinedOutput()
				wall := time.Since(start).Seconds()
				if err != nil {
					b.Fatalf("local: %v\n%s", err, out)
				}
				rss := float64(cmd.ProcessState.SysUsage().(*syscall.Rusage).Maxrss) / 1024 // KiB on Linux
				rate := float64(series) / wall
				b.ReportMetric(rate, "series/s")
				b.ReportMetric(fitRate(out), "fit-series/s")
				b.ReportMetric(rss, "peak-RSS-MiB")
				b.ReportMetric(float64(input)/(1<<20), "input-MiB")
				if depots == 2 {
					refRSS, refRate = rss, rate
				} else if refRSS > 0 {
					b.ReportMetric(rss/refRSS, "RSS-vs-10k")
					b.ReportMetric(rate/refRate, "rate-vs-10k")
				}
			}
		})
	}
}

var fitRE = regexp.MustCompile(`([0-9.]+) series/s fitting`)

// fitRate reads the fitting throughput from local's last stdout line.
func fitRate(out []byte) float64 {
	m := fitRE.FindSubmatch(out)
	if m == nil {
		return 0
	}
	v, _ := strconv.ParseFloat(string(m[1]), 64)
	return v
}
