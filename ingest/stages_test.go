package ingest

import (
	"errors"
	"testing"
)

// Shards cover the series exactly once, in order, with sizes that differ by
// at most one (floor((i-1)N/n) .. floor(iN/n)-1).
func TestShardRange(t *testing.T) {
	for _, c := range []struct{ series, shards int }{{1, 1}, {7, 3}, {9, 3}, {10, 4}, {5, 5}, {1000, 7}} {
		next := 0
		lo1, hi1 := Shard{1, c.shards}.Range(c.series)
		smallest, largest := hi1-lo1, hi1-lo1
		for i := 1; i <= c.shards; i++ {
			lo, hi := Shard{i, c.shards}.Range(c.series)
			if lo != next || hi < lo {
				t.Fatalf("%d series, shard %d/%d: %d..%d after %d", c.series, i, c.shards, lo, hi, next)
			}
			smallest, largest = min(smallest, hi-lo), max(largest, hi-lo)
			next = hi
		}
		if next != c.series || largest-smallest > 1 {
			t.Errorf("%d series in %d shards: end %d, sizes %d..%d", c.series, c.shards, next, smallest, largest)
		}
	}
}

func TestParseShard(t *testing.T) {
	for _, c := range []struct {
		in   string
		want Shard
		ok   bool
	}{
		{"1/1", Shard{1, 1}, true},
		{"3/8", Shard{3, 8}, true},
		{"8/8", Shard{8, 8}, true},
		{"0/8", Shard{}, false},
		{"9/8", Shard{}, false},
		{"3", Shard{}, false},
		{"a/b", Shard{}, false},
		{"1/0", Shard{}, false},
		{"", Shard{}, false},
	} {
		got, err := ParseShard(c.in)
		var ue *UsageError
		if c.ok && (err != nil || got != c.want) || !c.ok && !errors.As(err, &ue) {
			t.Errorf("ParseShard(%q) = %v, %v", c.in, got, err)
		}
	}
}
