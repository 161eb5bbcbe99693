package compute

import (
	"math"
	"math/rand/v2"
	"reflect"
	"strings"
	"testing"
)

func TestDynamicsWorkedExample(t *testing.T) {
	// docs/methods.md §4, worked by hand for k = 4 states and W = 10:
	//   w:  0 1 2 3 4 5 6 7 8 9
	//   s:  0 0 1 1 1 0 2 2 0 0
	// occupancy: state 0 at w = 0,1,5,8,9 -> 5/10; state 1 -> 3/10;
	//   state 2 -> 2/10; state 3 never -> 0.
	// dwells (maximal runs): state 0: [0 0] [0] [0 0] -> 3 runs, mean 5/3;
	//   state 1: [1 1 1] -> 1 run of 3; state 2: [2 2] -> 1 run of 2;
	//   state 3: none, MeanDwell 0 (NULL for the caller).
	// transitions s_w != s_{w+1}: at w = 1 (0->1), 4 (1->0), 5 (0->2),
	//   7 (2->0) -> 4.
	// counts N_ij over the 9 consecutive pairs: 0->0 at w = 0, 8 (2);
	//   0->1 (1); 0->2 (1); 1->1 at w = 2, 3 (2); 1->0 (1); 2->2 (1);
	//   2->0 (1); total 9 = W - 1.
	s := []int{0, 0, 1, 1, 1, 0, 2, 2, 0, 0}
	d, err := Dynamics(s, 4)
	if err != nil {
		t.Fatal(err)
	}
	want := StateDynamics{
		K: 4, Windows: 10,
		Occupancy:   []float64{0.5, 0.3, 0.2, 0},
		Dwells:      []int{3, 1, 1, 0},
		MeanDwell:   []float64{5.0 / 3, 3, 2, 0},
		Transitions: 4,
		Counts:      [][]int{{2, 1, 1, 0}, {1, 2, 0, 0}, {1, 0, 1, 0}, {0, 0, 0, 0}},
	}
	if !reflect.DeepEqual(d, want) {
		t.Fatalf("got %+v\nwant %+v", d, want)
	}
	// Row-normalised (docs/methods.md §4): row 0 = 2/4, 1/4, 1/4; row 1 = 1/3, 2/3;
	// row 2 = 1/2, 0, 1/2; row 3 has no transitions out.
	p, ok := d.Probabilities()
	wantP := [][]float64{{0.5, 0.25, 0.25, 0}, {1.0 / 3, 2.0 / 3, 0, 0}, {0.5, 0, 0.5, 0}, {0, 0, 0, 0}}
	for i := range wantP {
		for j := range wantP[i] {
			if math.Abs(p[i][j]-wantP[i][j]) > 1e-15 {
				t.Errorf("p[%d][%d] = %v, want %v", i, j, p[i][j], wantP[i][j])
			}
		}
	}
	if !reflect.DeepEqual(ok, []bool{true, true, true, false}) {
		t.Errorf("ok = %v", ok)
	}
	// Seconds: windows * step * TR; step 2, TR 1.5 -> state 1: 3*2*1.5.
	sec, sok := d.MeanDwellSeconds(2, 1.5)
	if math.Abs(sec[1]-9) > 1e-12 || sok[3] || sec[3] != 0 {
		t.Errorf("seconds %v ok %v", sec, sok)
	}
}

// Identities that follow from the definitions: sum_ij N_ij = W - 1,
// sum_k dwells = transitions + 1 (every transition starts a run),
// sum_k f_k = 1, and MeanDwell_k * Dwells_k = #{s_w = k}.
func TestDynamicsIdentities(t *testing.T) {
	r := rand.New(rand.NewPCG(6, 6))
	for trial := 0; trial < 100; trial++ {
		k := 1 + r.IntN(6)
		s := make([]int, 1+r.IntN(80))
		for w := range s {
			if w > 0 && r.IntN(4) > 0 {
				s[w] = s[w-1]
			} else {
				s[w] = r.IntN(k)
			}
		}
		d, err := Dynamics(s, k)
		if err != nil {
			t.Fatal(err)
		}
		counts, dwells, occ := 0, 0, 0.0
		for i := 0; i < k; i++ {
			for j := 0; j < k; j++ {
				counts += d.Counts[i][j]
			}
			dwells += d.Dwells[i]
			occ += d.Occupancy[i]
			if math.Abs(d.MeanDwell[i]*float64(d.Dwells[i])-d.Occupancy[i]*float64(len(s))) > 1e-9 {
				t.Fatalf("state %d: mean dwell %v x %d runs != visits", i, d.MeanDwell[i], d.Dwells[i])
			}
			if d.Dwells[i] == 0 && (d.Occupancy[i] != 0 || d.MeanDwell[i] != 0) {
				t.Fatalf("unvisited state %d has occupancy %v dwell %v", i, d.Occupancy[i], d.MeanDwell[i])
			}
		}
		if counts != len(s)-1 || dwells != d.Transitions+1 || math.Abs(occ-1) > 1e-12 {
			t.Fatalf("counts %d (W-1 = %d), dwells %d (transitions+1 = %d), occupancy sum %v", counts, len(s)-1, dwells, d.Transitions+1, occ)
		}
	}
}

func TestDynamicsErrors(t *testing.T) {
	for _, tc := range []struct {
		name   string
		labels []int
		k      int
	}{
		{"empty", nil, 3},
		{"label too large", []int{0, 3}, 3},
		{"negative label", []int{-1}, 3},
		{"k=0", []int{0}, 0},
	} {
		t.Run(tc.name, func(t *testing.T) {
			if _, err := Dynamics(tc.labels, tc.k); err == nil || !strings.HasPrefix(err.Error(), "compute: ") {
				t.Fatalf("err = %v", err)
			}
		})
	}
}
