package pipeline

import (
	"sync"
	"time"

	"almanac.dev/almanac/trainer/summary"
)

// logMu serialises writes to Env.Log: the progress ticker prints from its own goroutine.
var logMu sync.Mutex

// tracker keeps a train shard's progress and prints it as a summary.Progress line on every
// phase change and every Env.ProgressEvery (default summary.ProgressInterval) in between, so
// a pod that hangs shows a growing idleSeconds and a pod that froze shows an old time.
type tracker struct {
	env   Env
	mu    sync.Mutex
	p     summary.Progress
	moved time.Time // when a counter or the phase last changed
	fit   time.Time // when fitting started
	stop  chan struct{}
	once  sync.Once
	wg    sync.WaitGroup
}

// startTracker prints the shard's first line (phase reading) and starts the ticker.
func startTracker(env Env, shard, units int) *tracker {
	t := &tracker{env: env, stop: make(chan struct{})}
	t.p = summary.Progress{Shard: shard, Phase: summary.PhaseReading, Units: units}
	t.moved = env.now()
	t.print()
	every := env.ProgressEvery
	if every == 0 {
		every = summary.ProgressInterval
	}
	if every > 0 {
		t.wg.Add(1)
		go func() {
			defer t.wg.Done()
			tick := time.NewTicker(every)
			defer tick.Stop()
			for {
				select {
				case <-t.stop:
					return
				case <-tick.C:
					t.print()
				}
			}
		}()
	}
	return t
}

// update changes the progress under the lock and marks it moved.
func (t *tracker) update(fn func(p *summary.Progress)) {
	t.mu.Lock()
	fn(&t.p)
	t.moved = t.env.now()
	t.mu.Unlock()
}

// read counts one unit read.
func (t *tracker) read() { t.update(func(p *summary.Progress) { p.UnitsRead++ }) }

// fitting starts the fitting phase with the shard's series count (series plus series rejected
// when collected) and prints.
func (t *tracker) fitting(planned int) {
	t.update(func(p *summary.Progress) { p.Phase, p.Planned = summary.PhaseFitting, planned })
	t.mu.Lock()
	t.fit = t.moved
	t.mu.Unlock()
	t.print()
}

// collected adds a unit's series count (series plus rejected at collection) to the planned
// count, when units are fitted as they are read (streamShard): Planned reaches the shard's
// count once every unit is read. The first call starts the fitting phase and prints.
func (t *tracker) collected(n int) {
	t.mu.Lock()
	t.p.Planned += n
	t.moved = t.env.now()
	first := t.p.Phase == summary.PhaseReading
	if first {
		t.p.Phase, t.fit = summary.PhaseFitting, t.moved
	}
	t.mu.Unlock()
	if first {
		t.print()
	}
}

// done counts n series forecast or rejected.
func (t *tracker) done(n int) { t.update(func(p *summary.Progress) { p.Done += n }) }

// written counts one unit written.
func (t *tracker) written() { t.update(func(p *summary.Progress) { p.UnitsWritten++ }) }

// stopTicker stops the ticker; it may be called more than once.
func (t *tracker) stopTicker() {
	t.once.Do(func() { close(t.stop) })
	t.wg.Wait()
}

// finish stops the ticker and prints the last line (phase done).
func (t *tracker) finish() {
	t.stopTicker()
	t.update(func(p *summary.Progress) { p.Phase = summary.PhaseDone })
	t.print()
}

// snapshot returns the progress as of now.
func (t *tracker) snapshot() summary.Progress {
	t.mu.Lock()
	defer t.mu.Unlock()
	now := t.env.now()
	p := t.p
	p.Time = now.UTC()
	p.IdleSeconds = round1(now.Sub(t.moved).Seconds())
	if !t.fit.IsZero() {
		p.FitSeconds = round1(now.Sub(t.fit).Seconds())
	}
	return p
}

func (t *tracker) print() {
	if t.env.Log == nil {
		return
	}
	line := t.snapshot().Line()
	logMu.Lock()
	defer logMu.Unlock()
	_, _ = t.env.Log.Write([]byte(line + "\n"))
}

func round1(x float64) float64 { return float64(int64(x*10+0.5)) / 10 }
