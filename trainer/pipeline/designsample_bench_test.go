package pipeline

import (
	"context"
	"runtime"
	"runtime/metrics"
	"strings"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/design"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/synth"
)

// BenchmarkPlanDesignSample measures what deciding the design in plan costs: the plan step
// on ALMANAC_PLAN_SERIES generated weekly item x depot series (default 2000, in 8 Parquet
// objects, hash buckets, 160 weeks) with selection.design Fixed (no sample: plan only
// counts) and Auto (the same pass also draws the design sample, and plan then runs the inner
// holdout on it). The Auto sub-benchmark reports
//
//	ratio       = Auto's wall time / Fixed's (same run)
//	cpu_ratio   = Auto's process CPU time / Fixed's (user + system; the figure to read on a
//	              loaded machine)
//	alloc_ratio = bytes allocated by Auto's plan / Fixed's
//
// and both report cpu_s and peak_heap_MB, the largest heap of live and not yet swept objects
// seen during the step (read every 5 ms), which grows with the sample's size, not with the
// portfolio's.
//
//	ALMANAC_PLAN_SERIES=20000 nice go test ./trainer/pipeline -run '^$' -bench PlanDesignSample -benchtime 1x
func BenchmarkPlanDesignSample(b *testing.B) {
	n := benchInt(b, "ALMANAC_PLAN_SERIES", 2000)
	ctx := context.Background()
	dir := b.TempDir()
	o := synth.Options{Items: max(1, n/8), Depots: 8, Frequency: synth.Weekly, Periods: 160, Seed: 7}
	if _, err := o.Write(ctx, mustOpen(b, "file://"+dir), "in/", synth.Parquet); err != nil {
		b.Fatal(err)
	}
	cfg := func(mode string) *runconfig.Config {
		c := weeklyConfig(dir, o, "flp-plan-"+strings.ToLower(mode), "out-"+strings.ToLower(mode), runconfig.PartitionHashBuckets)
		c.Selection.Design = mode
		return c
	}
	var fixedWall, fixedCPU, fixedAlloc float64
	for _, mode := range []string{runconfig.DesignFixed, runconfig.DesignAuto} {
		b.Run(mode, func(b *testing.B) {
			c := cfg(mode)
			var wall, cpu, alloc, peak float64
			for i := 0; i < b.N; i++ {
				runtime.GC()
				var m0 runtime.MemStats
				runtime.ReadMemStats(&m0)
				stop := make(chan struct{})
				peaked := make(chan uint64)
				go func() {
					var top uint64
					sample := []metrics.Sample{{Name: "/memory/classes/heap/objects:bytes"}}
					tick := time.NewTicker(5 * time.Millisecond)
					defer tick.Stop()
					for {
						metrics.Read(sample) // no stop-the-world, unlike runtime.ReadMemStats
						top = max(top, sample[0].Value.Uint64())
						select {
						case <-stop:
							peaked <- top
							return
						case <-tick.C:
						}
					}
				}()
				t0, c0 := time.Now(), design.ProcessCPU()
				if _, err := RunPlan(ctx, c, Env{}); err != nil {
					b.Fatal(err)
				}
				wall += time.Since(t0).Seconds()
				cpu += (design.ProcessCPU() - c0).Seconds()
				close(stop)
				peak = max(peak, float64(<-peaked)/(1<<20))
				var m1 runtime.MemStats
				runtime.ReadMemStats(&m1)
				alloc += float64(m1.TotalAlloc - m0.TotalAlloc)
			}
			wall, cpu, alloc = wall/float64(b.N), cpu/float64(b.N), alloc/float64(b.N)
			b.ReportMetric(peak, "peak_heap_MB")
			b.ReportMetric(cpu, "cpu_s")
			b.ReportMetric(float64(n), "series")
			if mode == runconfig.DesignFixed {
				fixedWall, fixedCPU, fixedAlloc = wall, cpu, alloc
			} else if fixedWall > 0 {
				b.ReportMetric(wall/fixedWall, "ratio")
				b.ReportMetric(cpu/fixedCPU, "cpu_ratio")
				b.ReportMetric(alloc/fixedAlloc, "alloc_ratio")
			}
		})
	}
}
