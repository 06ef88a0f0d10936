package sinkhorn

import (
	"math"
	"slices"
)

// logKernel applies the Gibbs kernel in the log domain,
//
//	dst(p) = log sum_q exp(src(q) - |p - q|^2 / epsilon),
//
// separably, as two 1-D log-sum-exp passes, so that no value under- or
// overflows whatever the range of src (the remedy of Chizat, Peyre,
// Schmitzer, Vialard 2018 and Schmitzer 2019 for small epsilon).
//
// Each 1-D pass finds, for every output i, the maximiser j*(i) of
// h_j - c (i - j)^2 from the lower envelope of parabolas in linear time
// (Felzenszwalb & Huttenlocher, Theory of Computing 8, 2012), then sums
// exp(term - max) outward from j* and stops where prefix or suffix maxima of
// h prove that every remaining term lies more than logDrop below the
// maximum (adaptive truncation, Schmitzer 2019). Each dropped term is below
// exp(-logDrop) = 2.3e-16 of the largest, so the relative error of an
// output is below n * 2.3e-16; TestLogKernelTruncation measures it against
// the full sum. The cost is a few exponentials per output (about
// 2 sqrt(logDrop / c) + 1 of them) instead of one per pixel of the line.
type logKernel struct {
	rows, cols int
	cx, cy     float64 // dx^2/eps, dy^2/eps
}

// logDrop: terms more than this below an output's largest are dropped.
const logDrop = 36.0

func newLogKernel(rows, cols int, dx, dy, eps float64) *logKernel {
	return &logKernel{rows: rows, cols: cols, cx: dx * dx / eps, cy: dy * dy / eps}
}

// lseScratch is one worker's scratch for the 1-D passes.
type lseScratch struct {
	v               []int
	z, pre, suf, ex []float64 // ex: the terms of the current output, by j
	env             []float64 // each output's largest term (see lseLine)
	jstar           []int     // and where it lies
	zero            []float64 // zeros, the reference of lseLine's exps
	wlo, whi        []int32   // each output's window, for blocked windows
	one             []float64 // ones, the reference input of their sums
}

func newLSEScratch(rows, cols int) *lseScratch {
	n := max(rows, cols)
	return &lseScratch{v: make([]int, n), z: make([]float64, n+1), pre: make([]float64, n), suf: make([]float64, n),
		ex: make([]float64, n), env: make([]float64, n), jstar: make([]int, n), zero: make([]float64, n),
		wlo: make([]int32, n), whi: make([]int32, n), one: slices.Repeat([]float64{1}, n)}
}

// apply writes the log-domain kernel of src to dst; tmp has their size.
// -Inf entries in src stand for zero mass.
func (k *logKernel) apply(dst, src, tmp []float64, s *lseScratch) {
	// Along x on rows, then transpose so that y is contiguous too.
	for r := 0; r < k.rows; r++ {
		lseLine(tmp[r*k.cols:(r+1)*k.cols], src[r*k.cols:(r+1)*k.cols], k.cx, logDrop, s, nil)
	}
	transpose(dst, tmp, k.rows, k.cols)
	for c := 0; c < k.cols; c++ {
		lseLine(tmp[c*k.rows:(c+1)*k.rows], dst[c*k.rows:(c+1)*k.rows], k.cy, logDrop, s, nil)
	}
	transpose(dst, tmp, k.cols, k.rows)
}

// lseLine computes out[i] = log sum_j exp(h[j] - c (i-j)^2) for one line,
// dropping terms more than drop below an output's largest. With rec set it
// also appends each output's window of normalised weights
// exp(h[j] - c (i-j)^2 - out[i]) (see absKernel).
func lseLine(out, h []float64, c, drop float64, s *lseScratch, rec *windows) {
	n := len(h)
	ninf := math.Inf(-1)
	// Lower envelope of the parabolas -h_j + c (i - j)^2 over finite h_j.
	v, z := s.v[:n], s.z[:n+1]
	m := -1
	for q := 0; q < n; q++ {
		if h[q] == ninf {
			continue
		}
		fq := -h[q] + c*float64(q)*float64(q)
		if m < 0 {
			m = 0
			v[0], z[0] = q, math.Inf(-1)
			z[1] = math.Inf(1)
			continue
		}
		// z[0] = -Inf stops the loop at the first parabola.
		var x float64
		for {
			p := v[m]
			fp := -h[p] + c*float64(p)*float64(p)
			x = (fq - fp) / (2 * c * float64(q-p))
			if x > z[m] {
				break
			}
			m--
		}
		m++
		v[m], z[m] = q, x
		z[m+1] = math.Inf(1)
	}
	if m < 0 {
		if rec != nil && rec.blocked {
			rec.addEmptyBlocks(n)
		}
		for i := range out {
			out[i] = ninf
			if rec != nil && !rec.blocked {
				rec.addScaled(0, nil, 1)
			}
		}
		return
	}
	// Prefix and suffix maxima bound the terms not yet visited.
	pre, suf := s.pre[:n], s.suf[:n]
	mx := ninf
	for j := 0; j < n; j++ {
		if h[j] > mx { // math.Max's NaN and signed-zero cases cannot occur; it was 1.3% of a solve
			mx = h[j]
		}
		pre[j] = mx
	}
	mx = ninf
	for j := n - 1; j >= 0; j-- {
		if h[j] > mx {
			mx = h[j]
		}
		suf[j] = mx
	}
	// Each output's maximiser j*(i) and largest term, the envelope's value
	// E(i) = max_j h_j - c (i - j)^2, which bounds the other terms too (see
	// the scans).
	env, jstar := s.env[:n], s.jstar[:n]
	for i, e := 0, 0; i < n; i++ {
		for e < m && z[e+1] < float64(i) {
			e++
		}
		d := float64(i) - float64(v[e])
		jstar[i], env[i] = v[e], h[v[e]]-c*d*d
	}
	loPrev, hiPrev := n, -1
	for i := 0; i < n; i++ {
		js, best := jstar[i], env[i]
		fi := float64(i)
		term := func(j int) float64 { // the term's exponent, relative to the largest
			d := float64(j) - fi
			return h[j] - c*d*d - best
		}
		// Right of j*: once past i the distance only grows, so suf bounds
		// everything further out. So does the envelope, much closer: for
		// any x >= i and j' >= j, h_j' <= E(x) + c (j' - x)^2 gives
		//
		//	h_j' - c (j' - i)^2 <= E(x) - c (x - i) (2 j - x - i),
		//
		// tightest near x = i + j - j* (exactly the window's end for a
		// quadratic h); to the left the same with x <= i and j' <= j.
		// With the maxima alone the scans ran on four times the window (62
		// terms per output for windows of 15.5, 8 x 256^2 at epsilon 1;
		// with E(j) 39, with x = i + j - j* 24). The bounds hold from any
		// j, so each scan starts past the previous output's window, where
		// the next window's new terms are, and looks back inside it only
		// when none is there (windows move with their outputs; lseLine's
		// own CPU in two 8 x 256^2 solves 2.54 -> 1.47 s). The windows are
		// the same.
		hi, start := -1, max(js, hiPrev)+1
		for j := start; j < n; j++ {
			d := float64(j) - fi
			cd := c * d * d
			if j >= i && suf[j]-cd-best < -drop {
				break
			}
			if x := min(i+j-js, n-1); env[x]-c*float64(x-i)*float64(2*j-x-i)-best < -drop {
				break
			}
			if h[j]-cd-best > -drop {
				hi = j
			}
		}
		if hi < 0 {
			hi = js
			for j := start - 1; j > js; j-- {
				if term(j) > -drop {
					hi = j
					break
				}
			}
		}
		lo, start := -1, min(js, loPrev)-1
		for j := start; j >= 0; j-- {
			d := fi - float64(j)
			cd := c * d * d
			if j <= i && pre[j]-cd-best < -drop {
				break
			}
			if x := max(i+j-js, 0); env[x]-c*float64(x-i)*float64(2*j-x-i)-best < -drop {
				break
			}
			if h[j]-cd-best > -drop {
				lo = j
			}
		}
		if lo < 0 {
			lo = js
			for j := start + 1; j < js; j++ {
				if term(j) > -drop {
					lo = j
					break
				}
			}
		}
		loPrev, hiPrev = lo, hi
		if rec != nil && rec.blocked {
			s.wlo[i], s.whi[i] = int32(lo), int32(hi) // the blocks follow
			continue
		}
		// Each term's exponent (-Inf for a dropped one); the exps follow
		// in one vector call (expShift): one expNeg per term was a third
		// of a rebuild.
		ex := s.ex[:n]
		for j := lo; j <= hi; j++ {
			ex[j] = ninf
			if t := term(j); t > -drop {
				ex[j] = t
			}
		}
		ex[js] = 0
		win := ex[lo : hi+1]
		// The exps run on whole groups of four where the line allows (a
		// scalar tail of one to three expNeg calls per output was 2% of a
		// solve); the entries past the window are scratch, set to -Inf so
		// that no stale value is taken to exp again and again.
		pad := ex[lo:min(lo+(len(win)+3)&^3, n)]
		for j := len(win); j < len(pad); j++ {
			pad[j] = ninf
		}
		expShift(pad, pad, s.zero[:len(pad)], 0)
		sum := 0.0
		for _, x := range win {
			sum += x
		}
		// sum >= 1 (it holds exp(0) of the largest term). Rebuilds of
		// single-precision windows take fastLog's table path (2e-16 from
		// math.Log, which was 4% of a solve here); the full kernel and the
		// windows of unbalanced problems keep math.Log (see absKernel.fast).
		if rec != nil && rec.single {
			out[i] = sum // its log after the loop
		} else {
			out[i] = best + math.Log(sum)
		}
		if rec != nil {
			rec.addScaled(lo, win, 1/sum)
		}
	}
	if rec != nil && rec.blocked {
		rec.addBlocks(out, h, c, s)
		return
	}
	if rec != nil && rec.single {
		// out = env + log(sum), four lanes at a time (a scalar fastLog per
		// output was 2.4% of a 256^2 solve).
		logAdd(out, env, 0)
	}
}

// expTab[i] = 2^(i/64).
var expTab = func() (t [64]float64) {
	for i := range t {
		t[i] = math.Exp2(float64(i) / 64)
	}
	return
}()

// expNeg returns exp(x) for x in [-700, 700] (a few ulp, checked against
// math.Exp in TestExpNeg; the kernels call it on [-singleDrop, singleMax]): x = (n/64) ln 2 + r with |r| <= ln2/128, then
// 2^(n/64) from a table and exp(r) from its Taylor polynomial of degree 6
// (remainder below 1e-18). It is several times cheaper than math.Exp, which
// handles the whole range.
func expNeg(x float64) float64 {
	const (
		inv   = 64 / math.Ln2
		ln2hi = 6.93147180369123816490e-01 / 64
		ln2lo = 1.90821492927058770002e-10 / 64
	)
	n := int(math.Floor(x*inv + 0.5))
	r := (x - float64(n)*ln2hi) - float64(n)*ln2lo
	p := 1 + r*(1+r*(1.0/2+r*(1.0/6+r*(1.0/24+r*(1.0/120+r*(1.0/720))))))
	// n >> 6 floors (arithmetic shift); n & 63 is the table index.
	scale := math.Float64frombits(math.Float64bits(expTab[n&63]) + uint64(int64(n>>6))<<52)
	return scale * p
}

// transposeGo is transpose without assembly, in 32 x 32 blocks, for the
// rows from r4 on (all their columns) and the columns from c4 on of the
// rows above r4: what transpose's tiles leave, or with r4 = 0 everything.
func transposeGo(dst, src []float64, rows, cols, r4, c4 int) {
	const b = 32
	for r0 := 0; r0 < rows; r0 += b {
		for c0 := 0; c0 < cols; c0 += b {
			for r := r0; r < min(r0+b, rows); r++ {
				c := c0
				if r < r4 {
					c = max(c0, c4)
				}
				for ; c < min(c0+b, cols); c++ {
					dst[c*rows+r] = src[r*cols+c]
				}
			}
		}
	}
}

// logTab[j] = log(1 + j/256) and invTab[j] = 1 / (1 + j/256).
var logTab, invTab = func() (l, v [256]float64) {
	for j := range l {
		l[j] = math.Log1p(float64(j) / 256)
		v[j] = 1 / (1 + float64(j)/256)
	}
	return
}()

// fastLog returns log(x) for x > 0 (a few ulp, checked against math.Log in
// TestFastLog): x = 2^e (1 + j/256) (1 + r) with 0 <= r < 1/256, and
// log(1 + r) from six terms of its series (remainder below 2e-17), with no
// division (measured 15% faster than an atanh form with two; 4.5 ns against
// math.Log's 8 in a dependent loop). Zero, subnormal and non-finite x go to
// math.Log.
func fastLog(x float64) float64 {
	const (
		ln2hi = 6.93147180369123816490e-01
		ln2lo = 1.90821492927058770002e-10
	)
	b := math.Float64bits(x)
	e := int(b>>52) & 0x7ff
	if e == 0 || e == 0x7ff || b>>63 != 0 {
		return math.Log(x)
	}
	j := int(b>>44) & 255
	m := math.Float64frombits(b&(1<<52-1) | 1023<<52) // in [1, 2)
	// m - c is exact (Sterbenz); the product rounds once.
	r := (m - (1 + float64(j)/256)) * invTab[j]
	l := r * (1 - r*(1.0/2-r*(1.0/3-r*(1.0/4-r*(1.0/5-r*(1.0/6))))))
	k := float64(e - 1023)
	return k*ln2hi + (logTab[j] + l + k*ln2lo)
}
