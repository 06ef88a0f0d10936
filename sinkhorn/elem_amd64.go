package sinkhorn

import "math"

//go:noescape
func nearAVX(src, ref *float64, n int, c *float64) (lo, hi float64, bad int)

//go:noescape
func expShiftAVX(ee, src, ref *float64, n int, sgn, shift float64, c, tab *float64) (bad int)

//go:noescape
func logAddAVX(dst, out0 *float64, n int, shift float64, c, ltab, itab *float64) int

// elemConsts are the assembly's constants, each four times (see elem_amd64.s
// for the offsets).
var elemConsts = func() (c [108]float64) {
	bits := func(u uint64) float64 { return math.Float64frombits(u) }
	vals := []float64{
		math.Inf(-1), math.Inf(1),
		64 / math.Ln2, 6.93147180369123816490e-01 / 64, 1.90821492927058770002e-10 / 64,
		1.0 / 720, 1.0 / 120, 1.0 / 24, 1.0 / 6, 1.0 / 2, 1,
		0, // the int32 mask, below
		0x1p-1022,
		bits(255), bits(1<<52 - 1), bits(1023 << 52), bits(0xfffff << 44),
		1.0 / 6, 1.0 / 5, 1.0 / 4, 1.0 / 3,
		bits(0x4330000000000000), 0x1p52 + 1023,
		1.90821492927058770002e-10, 6.93147180369123816490e-01,
		-700, 700,
	}
	for k, v := range vals {
		for l := range 4 {
			c[4*k+l] = v
		}
	}
	// Offset 352: four int32 63s in the first 16 bytes.
	c[44], c[45], c[46], c[47] = bits(63|63<<32), bits(63|63<<32), 0, 0
	return
}()

// nearScan returns the least and largest src - ref over finite src, and
// false where exactly one of src[i], ref[i] is -Inf.
func nearScan(src, ref []float64) (lo, hi float64, ok bool) {
	n4 := 0
	lo, hi = math.Inf(1), math.Inf(-1)
	if useAVX && len(src) >= 4 {
		n4 = len(src) &^ 3
		_ = ref[n4-1]
		var bad int
		lo, hi, bad = nearAVX(&src[0], &ref[0], n4, &elemConsts[0])
		if bad != 0 {
			return 0, 0, false
		}
	}
	return nearTail(src[n4:], ref[n4:len(src)], lo, hi)
}

// expShift writes ee[i] = exp(src[i] - ref[i] - shift), 0 where src[i] is
// -Inf.
func expShift(ee, src, ref []float64, shift float64) {
	n4 := 0
	if useAVX && len(src) >= 4 {
		n4 = len(src) &^ 3
		_, _ = ee[n4-1], ref[n4-1]
		expShiftAVX(&ee[0], &src[0], &ref[0], n4, 1, shift, &elemConsts[0], &expTab[0])
	}
	expShiftGo(ee[n4:], src[n4:], ref[n4:len(src)], shift)
}

// expSum writes m[i] = exp(a[i] + b[i]), 0 where a[i] is -Inf (a marginal
// u K v from log u and log K v).
func expSum(m, a, b []float64) {
	n4 := 0
	if useAVX && len(a) >= 4 {
		n4 = len(a) &^ 3
		_, _ = m[n4-1], b[n4-1]
		if expShiftAVX(&m[0], &a[0], &b[0], n4, -1, 0, &elemConsts[0], &expTab[0]) != 0 {
			n4 = 0 // an argument beyond expNeg's range: all by math.Exp
		}
	}
	expSumGo(m[n4:], a[n4:], b[n4:len(a)])
}

// logAdd writes dst[i] = out0[i] + shift + fastLog(dst[i]).
func logAdd(dst, out0 []float64, shift float64) {
	_ = out0[:len(dst)]
	byGroups(len(dst), func(i, n int) int {
		return logAddAVX(&dst[i], &out0[i], n, shift, &elemConsts[0], &logTab[0], &invTab[0])
	}, func(i, j int) { logAddGo(dst[i:j], out0[i:j], shift) })
}

// byGroups runs a vector pass that stops before a group of four it cannot
// take (vec(i, n) over n entries from i returns how many it wrote): that
// group, and the last len mod 4 entries, go to scalar(i, j) over [i, j).
func byGroups(length int, vec func(i, n int) int, scalar func(i, j int)) {
	i := 0
	if useAVX && length >= 4 {
		n4 := length &^ 3
		for i < n4 {
			i += vec(i, n4-i)
			if i < n4 {
				scalar(i, i+4)
				i += 4
			}
		}
	}
	scalar(i, length)
}

//go:noescape
func relaxDivAVX(dst, num, den, test *float64, n int, c float64, plain int, cst *float64)

//go:noescape
func logAxpyAVX(acc, x *float64, n int, w float64, c, ltab, itab *float64) int

// relaxDiv writes dst[i] = relax(dst[i], t, omega), t = num[i] / den[i]
// where test[i] > 0 and 0 elsewhere: the scaling iteration's updates, which
// took a quarter of a solve at epsilon 16 one division at a time.
func relaxDiv(dst, num, den, test []float64, omega float64) {
	n4 := 0
	if useAVX && len(dst) >= 4 {
		n4 = len(dst) &^ 3
		_, _, _ = num[n4-1], den[n4-1], test[n4-1]
		plain := 0
		if omega == 1 {
			plain = 1
		}
		relaxDivAVX(&dst[0], &num[0], &den[0], &test[0], n4, 1-omega, plain, &elemConsts[0])
	}
	relaxDivGo(dst[n4:], num[n4:], den[n4:], test[n4:len(dst)], omega)
}

// logAxpy adds w log(x[i]) to acc[i] (fastLog; math.Log where x is zero,
// subnormal or not finite).
func logAxpy(acc, x []float64, w float64) {
	_ = x[:len(acc)]
	byGroups(len(acc), func(i, n int) int {
		return logAxpyAVX(&acc[i], &x[i], n, w, &elemConsts[0], &logTab[0], &invTab[0])
	}, func(i, j int) { logAxpyGo(acc[i:j], x[i:j], w) })
}

//go:noescape
func rangeAVX(a, kv, u, b, v *float64, n int, lo, hi float64) int

// inRange reports whether the scalings of one input are within the scaling
// representation's range (scalingIter.health, which names the pixel when
// they are not).
func inRange(a, kv, u, b, v []float64, lo, hi float64) bool {
	n4 := 0
	if useAVX && len(a) >= 4 {
		n4 = len(a) &^ 3
		_, _, _, _ = kv[n4-1], u[n4-1], b[n4-1], v[n4-1]
		if rangeAVX(&a[0], &kv[0], &u[0], &b[0], &v[0], n4, lo, hi) != 0 {
			return false
		}
	}
	return inRangeGo(a[n4:], kv[n4:], u[n4:], b[n4:], v[n4:len(a)], lo, hi)
}

//go:noescape
func relaxLogAVX(dst, p, q *float64, n int, omega float64, plain, both int, c *float64)

// relaxLog writes dst[i] = p[i] - q[i], over-relaxed against the old dst[i]
// where that is finite: (1 - omega) dst + omega (p - q); -Inf where p[i] is
// -Inf, or q[i] when both is set. These are the balanced log-domain updates
// of F and G.
func relaxLog(dst, p, q []float64, omega float64, both bool) {
	n4 := 0
	if useAVX && len(dst) >= 4 {
		n4 = len(dst) &^ 3
		_, _ = p[n4-1], q[n4-1]
		plain, b := 0, 0
		if omega == 1 {
			plain = 1
		}
		if both {
			b = 1
		}
		relaxLogAVX(&dst[0], &p[0], &q[0], n4, omega, plain, b, &elemConsts[0])
	}
	relaxLogGo(dst[n4:], p[n4:], q[n4:len(dst)], omega, both)
}
