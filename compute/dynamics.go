package compute

import "fmt"

// StateDynamics summarises one subject's state sequence s_1..s_W
// (docs/methods.md §4).
type StateDynamics struct {
	K, Windows int
	// Occupancy[k] is the fractional occupancy f_k = #{w : s_w = k} / W.
	Occupancy []float64
	// Dwells[k] is the number of dwells of state k, a dwell being a
	// maximal run of consecutive windows in one state.
	Dwells []int
	// MeanDwell[k] is the mean dwell length of state k in windows
	// (#{w : s_w = k} / Dwells[k]). It is 0 where Dwells[k] == 0: a state
	// never visited has no dwell time, and the caller must store NULL
	// there, not 0. Multiply by step * TR for seconds (MeanDwellSeconds).
	MeanDwell []float64
	// CompleteDwells[k] is the number of dwells of state k that are
	// complete: the run has a window of another state both before and
	// after it. A run that starts at the first window or ends at the last
	// is censored by the scan's edges (its true length is unknown, only a
	// lower bound); Dwells[k] - CompleteDwells[k] of them (docs/methods.md
	// §4).
	CompleteDwells []int
	// CompleteMeanDwell[k] is the mean length of the complete dwells of
	// state k in windows; 0 where CompleteDwells[k] == 0 (store NULL).
	CompleteMeanDwell []float64
	// Transitions is #{w : s_w != s_{w+1}}.
	Transitions int
	// Counts[i][j] = N_ij = #{w : s_w = i, s_{w+1} = j}; the entries sum
	// to W - 1.
	Counts [][]int
}

// Dynamics returns the state dynamics of a 0-based label sequence with k
// states (docs/methods.md §4). Errors: empty labels, k < 1, or a label
// outside [0, k).
func Dynamics(labels []int, k int) (StateDynamics, error) {
	if len(labels) == 0 {
		return StateDynamics{}, fmt.Errorf("compute: dynamics of an empty state sequence")
	}
	if k < 1 {
		return StateDynamics{}, fmt.Errorf("compute: dynamics needs k >= 1, got %d", k)
	}
	for w, s := range labels {
		if s < 0 || s >= k {
			return StateDynamics{}, fmt.Errorf("compute: state %d at window %d is outside [0, %d)", s, w, k)
		}
	}
	d := StateDynamics{
		K: k, Windows: len(labels),
		Occupancy: make([]float64, k),
		Dwells:    make([]int, k),
		MeanDwell: make([]float64, k),
		Counts:    make([][]int, k),

		CompleteDwells:    make([]int, k),
		CompleteMeanDwell: make([]float64, k),
	}
	for i := range d.Counts {
		d.Counts[i] = make([]int, k)
	}
	visits := make([]int, k)
	for w, s := range labels {
		visits[s]++
		if w == 0 || labels[w-1] != s {
			d.Dwells[s]++
		}
		if w+1 < len(labels) {
			next := labels[w+1]
			d.Counts[s][next]++
			if next != s {
				d.Transitions++
			}
		}
	}
	// Complete runs: start after the first window, end before the last.
	completeLen := make([]int, k)
	for start := 0; start < len(labels); {
		end := start
		for end+1 < len(labels) && labels[end+1] == labels[start] {
			end++
		}
		if start > 0 && end < len(labels)-1 {
			d.CompleteDwells[labels[start]]++
			completeLen[labels[start]] += end - start + 1
		}
		start = end + 1
	}
	for s := 0; s < k; s++ {
		if d.CompleteDwells[s] > 0 {
			d.CompleteMeanDwell[s] = float64(completeLen[s]) / float64(d.CompleteDwells[s])
		}
		d.Occupancy[s] = float64(visits[s]) / float64(len(labels))
		if d.Dwells[s] > 0 {
			d.MeanDwell[s] = float64(visits[s]) / float64(d.Dwells[s])
		}
	}
	return d, nil
}

// Probabilities returns the transition counts row-normalised,
// p[i][j] = N_ij / sum_j N_ij. A row with zero sum (a state never left
// because never visited, or visited only in the last window) stays all zero
// and ok[i] is false.
func (d StateDynamics) Probabilities() (p [][]float64, ok []bool) {
	p = make([][]float64, len(d.Counts))
	ok = make([]bool, len(d.Counts))
	for i, row := range d.Counts {
		p[i] = make([]float64, len(row))
		sum := 0
		for _, c := range row {
			sum += c
		}
		if sum == 0 {
			continue
		}
		ok[i] = true
		for j, c := range row {
			p[i][j] = float64(c) / float64(sum)
		}
	}
	return p, ok
}

// MeanDwellSeconds returns MeanDwell in seconds, windows * step * tr, with
// ok[k] false (and 0) where state k was never visited (store NULL there).
func (d StateDynamics) MeanDwellSeconds(step int, tr float64) (sec []float64, ok []bool) {
	sec = make([]float64, len(d.MeanDwell))
	ok = make([]bool, len(d.MeanDwell))
	for k, m := range d.MeanDwell {
		if d.Dwells[k] > 0 {
			sec[k], ok[k] = m*float64(step)*tr, true
		}
	}
	return sec, ok
}
