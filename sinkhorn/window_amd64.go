package sinkhorn

//go:noescape
func dotPass32AVX(out *float64, stride int, w *float32, off, lo *int32, x *float64, n int, m32 *int32, m64 *int64)

// tailMask32[t] and tailMask64[t] select the first t of four lanes.
var tailMask32, tailMask64 = func() (m32 [4][4]int32, m64 [4][4]int64) {
	for t := range 4 {
		for l := range t {
			m32[t][l], m64[t][l] = -1, -1
		}
	}
	return
}()

//go:noescape
func dotPassAVX(out *float64, stride int, w *float64, off, lo *int32, x *float64, n int, m64 *int64)

// dotPass writes, for the n outputs of one line of a pass (their window
// offsets off[0..n] and starts lo[0..n-1] into x), the window sums to
// out[o*stride]. The windows (13 weights at epsilon one squared pixel) are
// too short for a call per output: the loop over outputs is in assembly
// too. With AVX2 and FMA the absorbed kernel at 128^2 went from 0.55 to
// 0.35 ms at epsilon 1 and from 0.97 to 0.66 ms at 16 (BenchmarkKernel).
func dotPass(out []float64, stride int, r *windows, first, n int, x []float64) {
	if n == 0 {
		return
	}
	if useAVX && len(r.w32) > 0 { // single precision (windows.single)
		_ = out[(n-1)*stride]
		_ = r.off[first+n]
		dotPass32AVX(&out[0], stride, &r.w32[0], &r.off[first], &r.lo[first], &x[0], n, &tailMask32[0][0], &tailMask64[0][0])
		return
	}
	if useAVX && len(r.w) > 0 { // with no weights at all (inputs all -Inf) there is no &r.w[0]
		_ = out[(n-1)*stride]
		_ = r.off[first+n]
		dotPassAVX(&out[0], stride, &r.w[0], &r.off[first], &r.lo[first], &x[0], n, &tailMask64[0][0])
		return
	}
	dotPassGo(out, stride, r, first, n, x)
}

//go:noescape
func hornerAVX(out, x *float64, j0, aoff *int32, a *float32, nrm *float64, nb int, hp *float64) int

// noCoeffs stands in for the coefficients of windows that have none.
var noCoeffs [1]float32

// hornerBlocks runs hornerAVX on up to nb whole blocks of a line from block
// b (out from the block's first output) and returns how many it took: it
// stops at an irregular one.
func hornerBlocks(out []float64, r *windows, b, nb int, x []float64) int {
	if !useAVX || nb == 0 {
		return 0
	}
	_, _ = out[4*nb-1], r.nrm[4*(b+nb)-1]
	_, _ = r.j0[b+nb-1], r.aoff[b+nb]
	a := &noCoeffs[0]
	if len(r.a) > 0 {
		a = &r.a[0]
	}
	return hornerAVX(&out[0], &x[0], &r.j0[b], &r.aoff[b], a, &r.nrm[4*b], nb, &r.hp[0])
}
