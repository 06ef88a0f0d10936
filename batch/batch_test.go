package batch

import (
	"fmt"
	"testing"
)

// Shards spread groups evenly and do not depend on which other groups
// exist: 400 names over 4 shards give each between 70 and 130 (a binomial
// count of mean 100 and deviation 8.7 stays there with overwhelming
// probability for a hash that mixes well; a constant or a length-based
// assignment fails), and a name keeps its shard when others are added.
func TestShardSpread(t *testing.T) {
	count := make([]int, 4)
	for g := 0; g < 400; g++ {
		name := fmt.Sprintf("sample-%03d", g)
		hits := 0
		for i := 1; i <= 4; i++ {
			if InShard(name, i, 4) {
				count[i-1]++
				hits++
			}
		}
		if hits != 1 {
			t.Fatalf("%s in %d shards", name, hits)
		}
	}
	for i, c := range count {
		if c < 70 || c > 130 {
			t.Errorf("shard %d/4 holds %d of 400 groups", i+1, c)
		}
	}
}
