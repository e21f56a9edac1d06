package pipeline

import (
	"runtime"
	"sync"

	"modewatch/stream"
)

// DefaultWorkers is the number of scoring workers the service uses when
// none is configured: one per core the Go scheduler may use (GOMAXPROCS).
func DefaultWorkers() int { return runtime.GOMAXPROCS(0) }

// pool steps the units of one frame in parallel. Each unit belongs to one
// worker from the frame it is first seen (the least loaded by channels at
// that moment) and stays there, so one unit's frames are always stepped in
// order by the same goroutine; Frame waits for every worker before the
// next frame, so no frame overtakes another and the frame buffers the
// intake reuses are never read after Frame returns.
//
// Worker 0 is the goroutine calling Frame itself; workers 1…n-1 are
// goroutines started by New and stopped by Close. A pool of one worker
// starts no goroutine.
type pool struct {
	workers  []poolWorker
	assigned int // units of p.units given a worker
	f        *stream.Frame
	wg       sync.WaitGroup
	stop     sync.Once
}

type poolWorker struct {
	units    []*Unit
	channels int           // channels of its units when they were assigned
	wake     chan struct{} // nil for worker 0
}

func newPool(n int) *pool {
	if n < 1 {
		n = 1
	}
	w := &pool{workers: make([]poolWorker, n)}
	for i := 1; i < n; i++ {
		w.workers[i].wake = make(chan struct{}, 1)
		go w.run(&w.workers[i])
	}
	return w
}

// run is a worker's loop: on each wake-up it learns the current frame for
// its units.
func (w *pool) run(pw *poolWorker) {
	for range pw.wake {
		for _, u := range pw.units {
			if u.parallel() {
				u.stepModel(w.f)
			}
		}
		w.wg.Done()
	}
}

// place gives the units registered since the last call a worker.
func (w *pool) place(units []*Unit) {
	if w.assigned == len(units) {
		return
	}
	for _, u := range units {
		if u.placed() {
			continue
		}
		best := 0
		for i := range w.workers {
			if w.workers[i].channels < w.workers[best].channels {
				best = i
			}
		}
		u.worker = best + 1 // stored 1-based: 0 means not placed
		w.workers[best].units = append(w.workers[best].units, u)
		w.workers[best].channels += max(len(u.idx), 1)
	}
	w.assigned = len(units)
}

// learn steps the tracker of every unit whose parallel() holds over f, in
// parallel across the workers, and returns once all have finished.
func (w *pool) learn(f *stream.Frame) {
	w.f = f
	for i := 1; i < len(w.workers); i++ {
		if len(w.workers[i].units) > 0 {
			w.wg.Add(1)
			w.workers[i].wake <- struct{}{}
		}
	}
	for _, u := range w.workers[0].units {
		if u.parallel() {
			u.stepModel(f)
		}
	}
	w.wg.Wait()
	w.f = nil
}

// close stops the worker goroutines and gives all units to worker 0, so
// that frames after close are still scored, serially. It is idempotent.
func (w *pool) close() {
	w.stop.Do(func() {
		for i := 1; i < len(w.workers); i++ {
			close(w.workers[i].wake)
			w.workers[0].units = append(w.workers[0].units, w.workers[i].units...)
		}
		w.workers = w.workers[:1]
		for _, u := range w.workers[0].units {
			u.worker = 1
		}
	})
}

// placed reports whether the unit has a worker.
func (u *Unit) placed() bool { return u.worker > 0 }

// Workers returns the number of scoring workers (Options.Workers).
func (p *Pipeline) Workers() int { return len(p.pool.workers) }

// Close stops the scoring workers; frames after Close are scored by the
// calling goroutine alone. It is idempotent; a pipeline of one worker needs
// no Close.
func (p *Pipeline) Close() {
	p.mu.Lock()
	defer p.mu.Unlock()
	p.pool.close()
}

// forget takes a removed unit off its worker.
func (w *pool) forget(u *Unit) {
	if !u.placed() {
		return
	}
	pw := &w.workers[min(u.worker-1, len(w.workers)-1)]
	for i, v := range pw.units {
		if v == u {
			pw.units = append(pw.units[:i], pw.units[i+1:]...)
			pw.channels -= max(len(u.idx), 1)
			break
		}
	}
	w.assigned--
}
