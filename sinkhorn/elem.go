package sinkhorn

import "math"

// nearTail continues nearScan's bounds lo, hi over src and ref.
func nearTail(src, ref []float64, lo, hi float64) (float64, float64, bool) {
	ninf := math.Inf(-1)
	ref = ref[:len(src)]
	for i, x := range src {
		r := ref[i]
		if (x == ninf) != (r == ninf) {
			return 0, 0, false
		}
		if x != ninf {
			// Plain comparisons (math.Min and Max cost 25% of an
			// application). A NaN passes unseen and reaches the output, as
			// a rebuild would pass it; the driver's health check stops
			// the iteration on it.
			d := x - r
			if d < lo {
				lo = d
			}
			if d > hi {
				hi = d
			}
		}
	}
	return lo, hi, true
}

func expShiftGo(ee, src, ref []float64, shift float64) {
	ninf := math.Inf(-1)
	ee, ref = ee[:len(src)], ref[:len(src)]
	for i, x := range src {
		ee[i] = 0
		if x != ninf {
			ee[i] = expNeg(x - ref[i] - shift)
		}
	}
}

func logAddGo(dst, out0 []float64, shift float64) {
	out0 = out0[:len(dst)]
	for i, s := range dst {
		dst[i] = out0[i] + shift + fastLog(s)
	}
}

func expSumGo(m, a, b []float64) {
	ninf := math.Inf(-1)
	m, b = m[:len(a)], b[:len(a)]
	for i, x := range a {
		m[i] = 0
		if x != ninf {
			m[i] = math.Exp(x + b[i])
		}
	}
}
