//go:build !amd64

package sinkhorn

import "math"

func nearScan(src, ref []float64) (lo, hi float64, ok bool) {
	return nearTail(src, ref, math.Inf(1), math.Inf(-1))
}

func expShift(ee, src, ref []float64, shift float64) { expShiftGo(ee, src, ref, shift) }

func logAdd(dst, out0 []float64, shift float64) { logAddGo(dst, out0, shift) }

func expSum(m, a, b []float64) { expSumGo(m, a, b) }

func relaxDiv(dst, num, den, test []float64, omega float64) { relaxDivGo(dst, num, den, test, omega) }

func logAxpy(acc, x []float64, w float64) { logAxpyGo(acc, x, w) }

func inRange(a, kv, u, b, v []float64, lo, hi float64) bool { return inRangeGo(a, kv, u, b, v, lo, hi) }

func relaxLog(dst, p, q []float64, omega float64, both bool) { relaxLogGo(dst, p, q, omega, both) }
