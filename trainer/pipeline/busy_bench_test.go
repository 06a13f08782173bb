package pipeline

import (
	"context"
	"fmt"
	"os"
	"runtime"
	"slices"
	"strconv"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/design"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/synth"
)

// benchInt reads a positive whole number from the environment, else def.
func benchInt(b *testing.B, name string, def int) int {
	v := os.Getenv(name)
	if v == "" {
		return def
	}
	n, err := strconv.Atoi(v)
	if err != nil || n < 1 {
		b.Fatalf("%s=%q: want a whole number above 0", name, v)
	}
	return n
}

// BenchmarkBusyCores measures how busy the cores of one train pod are: one shard of
// ALMANAC_BUSY_OBJECTS Parquet objects (default 8) holding ALMANAC_BUSY_SERIES weekly item x
// depot series in all (default 800; 100000 by hand), the ETS+Theta zoo with the naive members,
// the automatic design, a 3-origin backtest, Parquet out. For 1, 4 and runtime.NumCPU()
// workers it reports
//
//	busy      = process CPU seconds / (wall seconds x workers)
//	cores     = process CPU seconds / wall seconds
//	speedup   = wall with 1 worker / wall with this many (same run)
//	spin      = cores / the cores w goroutines of pure arithmetic got for 2 s just before
//
// A worker count above the machine's cores cannot reach busy 1 (at most cores/workers). On a
// machine shared with other work, cores and busy fall with the load; spin, a ratio against a
// reference measured in the same run, is the figure to read there.
//
//	ALMANAC_BUSY_SERIES=100000 ALMANAC_BUSY_OBJECTS=10 nice go test ./trainer/pipeline \
//	    -run '^$' -bench BusyCores -benchtime 1x -timeout 2h
func BenchmarkBusyCores(b *testing.B) {
	n := benchInt(b, "ALMANAC_BUSY_SERIES", 800)
	objects := benchInt(b, "ALMANAC_BUSY_OBJECTS", 8)
	ctx := context.Background()
	dir := b.TempDir()
	o := synth.Options{Items: max(1, n/objects), Depots: objects, Frequency: synth.Weekly, Seed: 7}
	if _, err := o.Write(ctx, mustOpen(b, "file://"+dir), "in/", synth.Parquet); err != nil {
		b.Fatal(err)
	}
	cfg := weeklyConfig(dir, o, "flp-busy", "out", runconfig.PartitionObjects)
	cfg.Sharding.TargetSeriesPerShard = n + 1
	ps, err := RunPlan(ctx, cfg, Env{})
	if err != nil {
		b.Fatal(err)
	}
	if ps.Shards != 1 {
		b.Fatalf("plan cut %d shards, want 1", ps.Shards)
	}
	counts := []int{1, 4, runtime.NumCPU()}
	slices.Sort(counts)
	counts = slices.Compact(counts)
	var wall1 float64
	for _, w := range counts {
		b.Run(fmt.Sprintf("workers=%d", w), func(b *testing.B) {
			var cpu, wall, ref float64
			for i := 0; i < b.N; i++ {
				ref += spinCores(w, 2*time.Second)
				runtime.GC()
				c0, t0 := design.ProcessCPU(), time.Now()
				s, err := RunTrain(ctx, cfg, 0, Env{Workers: w, ProgressEvery: -1})
				if err != nil {
					b.Fatal(err)
				}
				if s.Trained == 0 {
					b.Fatalf("nothing trained: %+v", s)
				}
				cpu += (design.ProcessCPU() - c0).Seconds()
				wall += time.Since(t0).Seconds()
			}
			if w == 1 {
				wall1 = wall / float64(b.N)
			}
			b.ReportMetric(cpu/(wall*float64(w)), "busy")
			b.ReportMetric(cpu/wall, "cores")
			b.ReportMetric(cpu/wall/(ref/float64(b.N)), "spin")
			if wall1 > 0 {
				b.ReportMetric(wall1/(wall/float64(b.N)), "speedup")
			}
			b.ReportMetric(float64(n)*float64(b.N)/wall, "series/s")
		})
	}
}

// spinCores runs w goroutines of floating-point arithmetic for d and returns the process CPU
// seconds they took per wall second: the cores this process can get right now.
func spinCores(w int, d time.Duration) float64 {
	c0, t0 := design.ProcessCPU(), time.Now()
	deadline := t0.Add(d)
	done := make(chan float64, w)
	for range w {
		go func() {
			x := 1.0
			for time.Now().Before(deadline) {
				for k := 0; k < 10000; k++ {
					x = x*1.0000001 + 1e-9
				}
			}
			done <- x
		}()
	}
	for range w {
		<-done
	}
	return (design.ProcessCPU() - c0).Seconds() / time.Since(t0).Seconds()
}
