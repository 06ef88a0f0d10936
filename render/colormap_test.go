package render

import (
	"math"
	"testing"
)

// The colour map's OKLab lightness never falls from one level to the next (the
// property asked of it; OKLab per Ottosson 2020). Rounding to 8-bit sRGB
// may tie two neighbours (steps are 0.003 in L), never reverse them by
// more than that rounding.
func TestLagoonMonotoneLightness(t *testing.T) {
	first := linearToOKLabL(srgbToLinear(lagoon[0].R), srgbToLinear(lagoon[0].G), srgbToLinear(lagoon[0].B))
	prev := first
	for i, c := range lagoon[1:] {
		L := linearToOKLabL(srgbToLinear(c.R), srgbToLinear(c.G), srgbToLinear(c.B))
		if L < prev-5e-4 {
			t.Fatalf("level %d: lightness %.4f below %.4f", i+1, L, prev)
		}
		prev = math.Max(prev, L)
	}
	if prev-first < 0.75 {
		t.Errorf("lightness spans only %.3f", prev-first)
	}
}
