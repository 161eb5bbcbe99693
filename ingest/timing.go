package ingest

import (
	"sync"
	"time"
)

// workTimes sums, over the workers of the parallel stages, the wall time
// spent in each named part (reading a series, windows, assignment, ...).
// Parts keep the order in which they were first seen. Safe for concurrent
// use; the zero value is ready.
type workTimes struct {
	mu    sync.Mutex
	order []string
	d     map[string]time.Duration
}

// since adds the time elapsed since start to part and returns now, so calls
// chain: t = w.since("read", t).
func (w *workTimes) since(part string, start time.Time) time.Time {
	now := time.Now()
	w.mu.Lock()
	if w.d == nil {
		w.d = map[string]time.Duration{}
	}
	if _, ok := w.d[part]; !ok {
		w.order = append(w.order, part)
	}
	w.d[part] += now.Sub(start)
	w.mu.Unlock()
	return now
}

// list returns the parts in first-seen order.
func (w *workTimes) list() []PhaseTime {
	w.mu.Lock()
	defer w.mu.Unlock()
	out := make([]PhaseTime, len(w.order))
	for i, p := range w.order {
		out[i] = PhaseTime{p, w.d[p].Seconds()}
	}
	return out
}
