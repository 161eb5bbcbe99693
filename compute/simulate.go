package compute

import (
	"fmt"
	"math"
	"math/rand/v2"

	"gonum.org/v1/gonum/mat"
)

// CohortSpec describes a synthetic cohort for SimulateCohort. The generator
// is of this project's own design and no model of real data; zero fields
// take the defaults noted beside them.
type CohortSpec struct {
	Subjects, Regions, Timepoints, States int
	// TR is the sampling interval in seconds; 0 means 2.0. It does not
	// change the generated values (the chain runs per time point); it is
	// carried for the caller that writes the cohort out.
	TR float64
	// Stickiness is the per-time-point probability of staying in the
	// current state, in [0, 1); 0 means 0.97 (mean dwell 1/(1-0.97) = 33
	// time points).
	Stickiness float64
	// GroupEffect raises group B's stickiness to
	// min(Stickiness + GroupEffect, 0.999); 0 means no group difference.
	GroupEffect float64
	// Noise is the standard deviation of white measurement noise relative
	// to the unit-variance signal; 0 means 0.5.
	Noise float64
	// Offset is a constant added to every region (a scanner-like baseline,
	// e.g. 1000); 0 means none.
	Offset float64
	// Autocorr is phi, the lag-1 autocorrelation (per time point) of the
	// AR(1) latent factors z_t = phi z_{t-1} + sqrt(1 - phi^2) u_t, in
	// [0, 1); 0 means DefaultAutocorr. White turns the autocorrelation off
	// (phi = 0: time points independent given the state, the generator of
	// earlier versions). docs/methods.md §11.
	Autocorr float64
	White    bool
	Seed     uint64
}

// DefaultAutocorr is the default lag-1 autocorrelation phi of the latent
// AR(1) factors: our own choice, a moderate value between white noise and
// the strongly smoothed slow signal of resting-state recordings, so that a
// window of 30-60 time points still holds several effectively independent
// draws (docs/methods.md §11).
const DefaultAutocorr = 0.5

// SimSubject is one generated subject.
type SimSubject struct {
	ID     string // "sub-001", "sub-002", ...
	Group  string // "A" for subjects 1, 3, 5, ...; "B" for 2, 4, 6, ...
	Series Series
	Truth  []int // latent state (0-based) at each time point
}

const (
	defaultTR         = 2.0
	defaultStickiness = 0.97
	defaultNoise      = 0.5
	maxStickiness     = 0.999
	simWithin         = 0.6 // latent correlation within a module
	simBackground     = 0.1 // latent correlation between modules
	layoutStream      = 1 << 63
)

// withDefaults validates spec and fills its zero fields.
func (s CohortSpec) withDefaults() (CohortSpec, error) {
	switch {
	case s.Subjects < 1 || s.Timepoints < 1 || s.States < 1:
		return s, fmt.Errorf("compute: cohort needs at least one subject, time point and state (got %d, %d, %d)", s.Subjects, s.Timepoints, s.States)
	case s.Regions < 2:
		return s, fmt.Errorf("compute: cohort needs at least 2 regions, got %d", s.Regions)
	case !(s.TR >= 0) || math.IsInf(s.TR, 1):
		return s, fmt.Errorf("compute: cohort TR %v must be positive", s.TR)
	case !(s.Stickiness >= 0 && s.Stickiness < 1):
		return s, fmt.Errorf("compute: cohort stickiness %v must be in [0, 1)", s.Stickiness)
	case !(s.GroupEffect >= 0) || math.IsInf(s.GroupEffect, 1):
		return s, fmt.Errorf("compute: cohort group effect %v must be >= 0", s.GroupEffect)
	case !(s.Noise >= 0) || math.IsInf(s.Noise, 1):
		return s, fmt.Errorf("compute: cohort noise %v must be >= 0", s.Noise)
	case math.IsNaN(s.Offset) || math.IsInf(s.Offset, 0):
		return s, fmt.Errorf("compute: cohort offset %v must be finite", s.Offset)
	case !(s.Autocorr >= 0 && s.Autocorr < 1):
		return s, fmt.Errorf("compute: cohort autocorrelation %v must be in [0, 1)", s.Autocorr)
	}
	if s.TR == 0 {
		s.TR = defaultTR
	}
	if s.Stickiness == 0 {
		s.Stickiness = defaultStickiness
	}
	if s.Noise == 0 {
		s.Noise = defaultNoise
	}
	if s.White {
		s.Autocorr = 0
	} else if s.Autocorr == 0 {
		s.Autocorr = DefaultAutocorr
	}
	return s, nil
}

// stateModules returns the module of every region in state k: the regions,
// shuffled by a generator seeded from (Seed, 2^63 + k), are cut into
// M = min(2 + k mod 3, p) near-equal modules, so every state has its own
// layout and states 0, 1, 2 have 2, 3 and 4 modules.
func stateModules(s CohortSpec, k int) []int {
	p := s.Regions
	m := min(2+k%3, p)
	r := rand.New(rand.NewPCG(s.Seed, layoutStream+uint64(k)))
	perm := r.Perm(p)
	mod := make([]int, p)
	for pos, region := range perm {
		mod[region] = pos * m / p
	}
	return mod
}

// latentCorrelation is the signal correlation of state k: 1 on the
// diagonal, simWithin within a module, simBackground between modules. It is
// positive definite (a one-factor-per-module model; smallest eigenvalue
// 1 - simWithin).
func latentCorrelation(s CohortSpec, k int) []float64 {
	p := s.Regions
	mod := stateModules(s, k)
	c := make([]float64, p*p)
	for i := 0; i < p; i++ {
		for j := 0; j < p; j++ {
			switch {
			case i == j:
				c[i*p+j] = 1
			case mod[i] == mod[j]:
				c[i*p+j] = simWithin
			default:
				c[i*p+j] = simBackground
			}
		}
	}
	return c
}

// StateCorrelation returns the true correlation matrix (p x p, row-major)
// of the generated series while in state k: the latent state correlation
// Sigma_k (1 on the diagonal, 0.6 within a module of state k's own layout,
// 0.1 elsewhere) attenuated by the white noise, R_ij = Sigma_ij / (1 + Noise^2)
// for i != j, R_ii = 1. Errors: an invalid spec or k outside [0, States).
func StateCorrelation(spec CohortSpec, k int) ([]float64, error) {
	s, err := spec.withDefaults()
	if err != nil {
		return nil, err
	}
	if k < 0 || k >= s.States {
		return nil, fmt.Errorf("compute: state %d outside [0, %d)", k, s.States)
	}
	c := latentCorrelation(s, k)
	p := s.Regions
	att := 1 / (1 + s.Noise*s.Noise)
	for i := 0; i < p; i++ {
		for j := 0; j < p; j++ {
			if i != j {
				c[i*p+j] *= att
			}
		}
	}
	return c, nil
}

// SimulateCohort generates spec.Subjects subjects. Subject i (0-based) uses
// its own generator rand.New(rand.NewPCG(Seed, i)), so the cohort is a
// deterministic function of spec. Per subject:
//
//   - the latent state follows a sticky Markov chain: s_0 uniform, then stay
//     with probability q (Stickiness; group B, every second subject, uses
//     min(q + GroupEffect, 0.999)), otherwise move to one of the other
//     States - 1 states uniformly;
//   - at each time point y_t = L_{s_t} z_t + Noise e_t + Offset, with e_t
//     independent standard normal p-vectors (white measurement noise), z_t
//     p independent stationary AR(1) series with unit variance,
//     z_0 = u_0, z_t = phi z_{t-1} + sqrt(1 - phi^2) u_t (u_t standard
//     normal; phi = Autocorr, 0 if White; lag-h autocorrelation phi^h: Box,
//     Jenkins & Reinsel, Time Series Analysis, ch. 3, from memory), and L_k the Cholesky factor
//     (gonum mat) of the latent correlation of state k (see
//     StateCorrelation): regions split into modules with their own layout per
//     state, high correlation within a module, a shared weak background
//     between modules.
//
// Because z_t has identity covariance at every t whatever the state, the
// correlation over any stretch of state k tends to StateCorrelation(spec,
// k); with White the time points are independent given the state. With
// States = 1 (or GroupEffect = 0) the groups are exchangeable; the state
// layouts depend on (Seed, k) only, never on the group, so GroupEffect
// changes dwell times and nothing else (the null kinds of docs/methods.md
// §12).
func SimulateCohort(spec CohortSpec) ([]SimSubject, error) {
	s, err := spec.withDefaults()
	if err != nil {
		return nil, err
	}
	p, T := s.Regions, s.Timepoints
	factors := make([][]float64, s.States)
	for k := range factors {
		var ch mat.Cholesky
		if !ch.Factorize(mat.NewSymDense(p, latentCorrelation(s, k))) {
			return nil, fmt.Errorf("compute: state %d correlation is not positive definite", k)
		}
		var l mat.TriDense
		ch.LTo(&l)
		f := make([]float64, p*p)
		for i := 0; i < p; i++ {
			for j := 0; j <= i; j++ {
				f[i*p+j] = l.At(i, j)
			}
		}
		factors[k] = f
	}
	out := make([]SimSubject, s.Subjects)
	z := make([]float64, p)
	phi := s.Autocorr
	innov := math.Sqrt(1 - phi*phi)
	for i := range out {
		r := rand.New(rand.NewPCG(s.Seed, uint64(i)))
		stick, group := s.Stickiness, "A"
		if i%2 == 1 {
			group = "B"
			stick = math.Min(stick+s.GroupEffect, maxStickiness)
		}
		truth := make([]int, T)
		truth[0] = r.IntN(s.States)
		for t := 1; t < T; t++ {
			cur := truth[t-1]
			if s.States > 1 && r.Float64() >= stick {
				next := r.IntN(s.States - 1)
				if next >= cur {
					next++
				}
				cur = next
			}
			truth[t] = cur
		}
		y := NewSeries(T, p)
		for t := 0; t < T; t++ {
			for j := range z {
				if t == 0 {
					z[j] = r.NormFloat64() // stationary start: unit variance
				} else {
					z[j] = phi*z[j] + innov*r.NormFloat64()
				}
			}
			f := factors[truth[t]]
			row := y.Data[t*p : (t+1)*p]
			for a := 0; a < p; a++ {
				v := 0.0
				for b := 0; b <= a; b++ {
					v += f[a*p+b] * z[b]
				}
				row[a] = v + s.Noise*r.NormFloat64() + s.Offset
			}
		}
		out[i] = SimSubject{ID: fmt.Sprintf("sub-%03d", i+1), Group: group, Series: y, Truth: truth}
	}
	return out, nil
}
