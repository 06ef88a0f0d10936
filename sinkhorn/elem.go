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

// marginalL1 returns sum_i |exp(F_i + lkv_i) - a_i|, the L1 violation of
// the marginal u K v = exp(F + log K v) against a (balanced problems),
// a block at a time: the exps four lanes at once (expSum), the sum as
// sumAbsDiff's (nonnegative terms).
func marginalL1(F, lkv, a []float64) float64 {
	var m [256]float64
	s := 0.0
	for i0 := 0; i0 < len(a); i0 += len(m) {
		i1 := min(i0+len(m), len(a))
		expSum(m[:i1-i0], F[i0:i1], lkv[i0:i1])
		s += sumAbsDiff(m[:i1-i0], a[i0:i1])
	}
	return s
}

// productL1 is marginalL1 in the scaling representation: sum_i |u_i kv_i -
// a_i|.
func productL1(u, kv, a []float64) float64 {
	var m [256]float64
	s := 0.0
	for i0 := 0; i0 < len(a); i0 += len(m) {
		mb := m[:min(len(m), len(a)-i0)]
		for i := range mb {
			mb[i] = u[i0+i] * kv[i0+i]
		}
		s += sumAbsDiff(mb, a[i0:])
	}
	return s
}

// relaxDivGo is relaxDiv's scalar form.
func relaxDivGo(dst, num, den, test []float64, omega float64) {
	num, den, test = num[:len(dst)], den[:len(dst)], test[:len(dst)]
	for i, old := range dst {
		t := 0.0
		if test[i] > 0 {
			t = num[i] / den[i]
		}
		dst[i] = relax(old, t, omega)
	}
}

// logAxpyGo is logAxpy's scalar form (fused as the vector one is).
func logAxpyGo(acc, x []float64, w float64) {
	x = x[:len(acc)]
	for i, v := range x {
		acc[i] = math.FMA(w, fastLog(v), acc[i])
	}
}

// inRangeGo is inRange's scalar form.
func inRangeGo(a, kv, u, b, v []float64, lo, hi float64) bool {
	kv, u, b, v = kv[:len(a)], u[:len(a)], b[:len(a)], v[:len(a)]
	for i, x := range a {
		if x > 0 && !(kv[i] > lo && u[i] > lo) || b[i] > 0 && !(v[i] > lo) || !(u[i] <= hi && v[i] <= hi) {
			return false
		}
	}
	return true
}

// relaxLogGo is relaxLog's scalar form.
func relaxLogGo(dst, p, q []float64, omega float64, both bool) {
	ninf := math.Inf(-1)
	p, q = p[:len(dst)], q[:len(dst)]
	for i, old := range dst {
		t := p[i] - q[i]
		if p[i] == ninf || both && q[i] == ninf {
			t = ninf
		} else if omega != 1 && old != ninf {
			t = math.FMA(omega, t, (1-omega)*old)
		}
		dst[i] = t
	}
}
