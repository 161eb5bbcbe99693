//go:build amd64

package compute

import (
	"math/rand/v2"
	"slices"
	"testing"
)

// The AVX2 kernels of the window correlations repeat the portable loops'
// IEEE operations in the same order (no fused multiply-add), so both paths
// must give bit-identical windows. (The dot-product kernels add in another
// order and are checked against gonum's Dsdot in TestDotKernels instead.)
func TestWindowKernelsMatchPortable(t *testing.T) {
	if !useAVX2 {
		t.Skip("no AVX2 and FMA on this machine")
	}
	y := winMixedSeries(rand.New(rand.NewPCG(21, 21)), 400, 37, 1000, 2.5)
	fast, err := SlidingCorrelations(y, WindowOptions{Width: 30, Step: 1})
	if err != nil {
		t.Fatal(err)
	}
	useAVX2 = false
	defer func() { useAVX2 = true }()
	slow, err := SlidingCorrelations(y, WindowOptions{Width: 30, Step: 1})
	if err != nil {
		t.Fatal(err)
	}
	if !slices.Equal(fast.Data, slow.Data) {
		t.Fatal("AVX2 and portable window correlations differ")
	}
}
