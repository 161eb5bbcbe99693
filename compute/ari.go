package compute

// AdjustedRandIndex returns the adjusted Rand index (Hubert and Arabie, 1985)
// of two labelings a and b of the same n items. With the contingency table
// n_ij = #{items with a = i and b = j}, row sums a_i, column sums b_j and
// C(m) = m(m-1)/2,
//
//	index    = sum_ij C(n_ij)
//	expected = [sum_i C(a_i)] [sum_j C(b_j)] / C(n)
//	maximum  = ([sum_i C(a_i)] + [sum_j C(b_j)]) / 2
//	ARI      = (index - expected) / (maximum - expected).
//
// Labels are arbitrary integers (only equality matters), so the index is
// invariant to relabeling. It is 1 for identical partitions and about 0 for
// independent ones; it can be negative. When maximum = expected (both
// partitions are a single cluster, or both are all singletons) the two
// partitions are identical and 1 is returned, as it is for n < 2.
// Counts are exact integers up to the final division. It panics if the
// lengths differ.
func AdjustedRandIndex(a, b []int) float64 {
	if len(a) != len(b) {
		panic("compute: slice length mismatch")
	}
	n := len(a)
	if n < 2 {
		return 1
	}
	type cell struct{ i, j int }
	nij := make(map[cell]int64)
	ai := make(map[int]int64)
	bj := make(map[int]int64)
	for t := range a {
		nij[cell{a[t], b[t]}]++
		ai[a[t]]++
		bj[b[t]]++
	}
	c2 := func(m int64) int64 { return m * (m - 1) / 2 }
	var index, sa, sb int64
	for _, m := range nij {
		index += c2(m)
	}
	for _, m := range ai {
		sa += c2(m)
	}
	for _, m := range bj {
		sb += c2(m)
	}
	total := float64(c2(int64(n)))
	expected := float64(sa) * float64(sb) / total
	maximum := (float64(sa) + float64(sb)) / 2
	if maximum == expected {
		return 1
	}
	return (float64(index) - expected) / (maximum - expected)
}
