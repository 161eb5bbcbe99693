package compute

import (
	"math"
	"slices"
	"sync"
)

// Radix sort of float64 values, used by GraphFiltration to sort its event
// sets (19,701 beta1 events per network at p = 200, sorted for every
// network of an ingest).
//
// The IEEE 754 bits of a float64 become an unsigned key whose order is the
// numeric order: a negative value has all its bits flipped (a larger
// magnitude then gives a smaller key), a non-negative value has its sign
// bit set. The keys are sorted by least-significant-digit radix sort.
//
// Order: the same as slices.Sort for values without NaN, with one
// difference in what is left unspecified: slices.Sort treats -0 and +0 as
// equal and leaves their relative order unspecified, the radix order puts
// every -0 before every +0 (and sortFloat64s does so on its comparison-sort
// path too). Both outputs are ascending and hold the same values; they can
// differ only in where the signs of zeros fall inside a run of zeros. NaN
// is not supported (its key sorts it above +Inf or below -Inf, by its sign
// bit); GraphFiltration refuses NaN and Inf weights (checkNetwork) before
// sorting.

// floatKey maps the bits of a non-NaN float64 to a uint64 of the same
// order.
func floatKey(x float64) uint64 {
	b := math.Float64bits(x)
	// Negative (sign bit 1): mask all ones. Non-negative: the sign bit.
	return b ^ (uint64(int64(b)>>63) | 1<<63)
}

// keyFloat is the inverse of floatKey.
func keyFloat(k uint64) float64 {
	// A key with its top bit set came from a non-negative value: clear the
	// bit. Otherwise the value was negative: flip every bit back.
	return math.Float64frombits(k ^ (uint64(int64(^k)>>63) | 1<<63))
}

const (
	// radixBits is the digit width, chosen by BenchmarkRadixDigits on
	// 19,701 values (8-bit digits in 8 passes were about 6% slower, 13 and
	// 16 bits slower still): 6 passes, 5 of 11 bits and the top 9 bits.
	// sortKeys spells out the 6 shifts, so a change here means one there.
	radixBits   = 11
	radixPasses = 6
	radixMask   = 1<<radixBits - 1
	// radixMinN: below this many values a comparison sort is used; the
	// radix sort's fixed cost (clearing and summing 6 x 2048 counts) makes
	// it slower below about 1,000 values (BenchmarkRadixSmall).
	radixMinN = 1024
)

// radixScratch is the per-call working memory of the radix sort, kept in a
// pool because GraphFiltration runs on several goroutines at once.
type radixScratch struct {
	keys, tmp []uint64
	hist      [radixPasses][1 << radixBits]uint32
}

var radixPool = sync.Pool{New: func() any { return new(radixScratch) }}

// getRadixScratch returns scratch with keys and tmp of length n.
func getRadixScratch(n int) *radixScratch {
	s := radixPool.Get().(*radixScratch)
	if cap(s.keys) < n {
		s.keys = make([]uint64, n)
		s.tmp = make([]uint64, n)
	}
	s.keys, s.tmp = s.keys[:n], s.tmp[:n]
	return s
}

// sortFloat64s sorts x ascending in place: a comparison sort below
// radixMinN values, the radix sort above. x must hold no NaN. See the order
// note above on -0 and +0.
func sortFloat64s(x []float64) {
	if len(x) < radixMinN {
		slices.Sort(x)
		zerosNegativeFirst(x)
		return
	}
	s := getRadixScratch(len(x))
	for i, v := range x {
		s.keys[i] = floatKey(v)
	}
	s.sortKeys()
	for i, k := range s.keys {
		x[i] = keyFloat(k)
	}
	radixPool.Put(s)
}

// zerosNegativeFirst puts the -0 of an ascending slice before its +0, the
// radix order, so that sortFloat64s orders zeros the same way on both of
// its paths.
func zerosNegativeFirst(x []float64) {
	lo, _ := slices.BinarySearch(x, 0) // first index with x[i] >= 0
	neg := 0
	hi := lo
	for ; hi < len(x) && x[hi] == 0; hi++ {
		if math.Signbit(x[hi]) {
			neg++
		}
	}
	for i := lo; i < hi; i++ {
		if i < lo+neg {
			x[i] = math.Copysign(0, -1)
		} else {
			x[i] = 0
		}
	}
}

// sortKeys sorts s.keys ascending by 11-bit digits, leaving the result in
// s.keys. The histograms of all digits are counted in one pass over the
// keys; a digit that is the same for every key (one bucket holding all of
// them, as the top digit of correlations of one sign) is skipped. The
// digit width is a constant so that the histogram indexing needs no bounds
// checks.
func (s *radixScratch) sortKeys() {
	const bits, mask = radixBits, radixMask
	n := len(s.keys)
	if n < 2 {
		return
	}
	h := &s.hist
	*h = [radixPasses][1 << radixBits]uint32{}
	for _, k := range s.keys {
		h[0][k&mask]++
		h[1][(k>>11)&mask]++
		h[2][(k>>22)&mask]++
		h[3][(k>>33)&mask]++
		h[4][(k>>44)&mask]++
		h[5][(k>>55)&mask]++
	}
	src, dst := s.keys, s.tmp[:n]
	for d := range radixPasses {
		c := &h[d]
		shift := uint(d * bits)
		if c[(src[0]>>shift)&mask] == uint32(n) {
			continue
		}
		var sum uint32
		for b, v := range c {
			c[b] = sum
			sum += v
		}
		for _, k := range src {
			b := (k >> shift) & mask
			dst[c[b]] = k
			c[b]++
		}
		src, dst = dst, src
	}
	if &src[0] != &s.keys[0] {
		copy(s.keys, src)
	}
}
