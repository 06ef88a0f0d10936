package sinkhorn

import (
	"math"
	"slices"
)

// Blocked windows: the single-precision windows of an absorbed kernel in a
// form that holds about 2.5 times fewer bytes per output. At 256^2 and
// 512^2 the window sums wait on memory (16 streams' weights are read once
// per application each), so bytes are time.
//
// Four consecutive outputs i = I + d of a line (d = 0..3) share one block.
// With mid = I + 3/2, delta = d - 3/2 and the block's inputs j = J0 + e,
//
//	-c (i - j)^2 = -c (mid - j)^2 + 2 c delta e - 2 c delta (mid - J0) - c delta^2,
//
// so every weight of the block is A_e rho_d^e times a factor of its own
// output, with A_e = exp(h0_j - c (mid - j)^2 - M + off) (M the largest
// exponent of the block, off a shift that keeps the A_e that matter within
// single precision's range) and rho_d = exp(2 c delta). An application
// forms sum_e A_e x_e rho_d^e for the four outputs at once and scales each
// by nrm_d, the reciprocal of the same sum at the reference (x = 1): the
// stored data per output are a quarter of the block's union window in
// single precision plus one double, against a whole window of singles and
// two indices.
//
// The union window of a block holds the windows of its outputs and, being
// exact terms, the few terms between them: nothing is dropped that the
// per-output windows kept. Its length is padded to a multiple of four
// (more exact terms) within the line. A block whose A_e would leave single
// precision's range (more than 170 between the largest and the least term
// an output keeps), or whose rho_d^e would approach double's, keeps
// per-output windows instead: where an output's maximiser jumps (two
// separate peaks in the input, the edge of a hole) the union spans both
// places (8 x N^2 benchmark fields at epsilon 1, counted over a solve's
// rebuilds: 0.05% of the full grid's blocks at 256^2, 0.06% at 512^2, up
// to 0.2% on coarser levels).

// hornerRange bounds the spread, in the log, of the coefficients a block
// keeps: single precision spans exp(-87) to exp(88).
const hornerRange = 170

// hornerPowers returns the table of rho_d^e = exp(2 c (d - 3/2) e) for a
// block's terms e = 0.. on a line of n: sixteen entries per four terms (four
// powers for each d), for as many terms as the line holds and the powers
// stay below exp(500), so that the sums stay within double's range.
func hornerPowers(c float64, n int) []float64 {
	terms := (n + 3) &^ 3
	if m := int(500/(3*c)) &^ 3; m < terms {
		terms = m
	}
	hp := make([]float64, 4*max(terms, 0))
	for g := 0; g < terms/4; g++ {
		for d := range 4 {
			for k := range 4 {
				hp[16*g+4*d+k] = math.Exp(2 * c * (float64(d) - 1.5) * float64(4*g+k))
			}
		}
	}
	return hp
}

// addBlocks records the blocks of one line of n = len(h) outputs from the
// windows [s.wlo[i], s.whi[i]] that lseLine found and writes each output's
// log-sum to out.
//
// The log-sums are those of the rounded coefficients, the kernel that the
// applications use, so that the output of a rebuild and the applications
// after it agree (the coefficients are within 2^-24 of exact, as the
// per-output single-precision weights are).
func (r *windows) addBlocks(out, h []float64, c float64, s *lseScratch) {
	n := len(h)
	ninf := math.Inf(-1)
	wlo, whi := s.wlo[:n], s.whi[:n]
	offs := s.env[:n] // free once lseLine's outputs are scanned
	b0 := len(r.j0)
	for I := 0; I < n; I += 4 {
		nd := min(4, n-I)
		J0, J1 := int(wlo[I]), int(whi[I])+1
		for d := 1; d < nd; d++ {
			J0, J1 = min(J0, int(wlo[I+d])), max(J1, int(whi[I+d])+1)
		}
		ep := (J1 - J0 + 3) &^ 3
		if ep > n || 4*ep > len(r.hp) {
			r.addIrregular(offs, h, c, s, I)
			continue
		}
		u0, u1 := J0, J1
		J0 = min(J0, n-ep)
		mid := float64(I) + 1.5
		tt := s.pre[:ep]
		M := exponents(tt, h[J0:], mid-float64(J0), c)
		// The least exponent within the union of the outputs' windows
		// (-Inf terms aside): the windows of a block overlap, and where
		// they do not the terms between count too, which only sends more
		// blocks to per-output windows.
		least := M
		for _, x := range tt[u0-J0 : u1-J0] {
			if x < least && x != ninf {
				least = x
			}
		}
		if M-least > hornerRange {
			r.addIrregular(offs, h, c, s, I)
			continue
		}
		off := max(0, M-least-hornerRange/2)
		for k, x := range tt {
			if x-M+off < -700 {
				tt[k] = ninf // below any single, and beyond expShift's range
			}
		}
		n0 := len(r.a)
		r.a = slices.Grow(r.a, ep)[:n0+ep]
		ee := s.ex[:ep]
		expShift(ee, tt, s.zero[:ep], M-off)
		for k, x := range ee {
			r.a[n0+k] = float32(x)
		}
		r.j0 = append(r.j0, int32(J0))
		r.aoff = append(r.aoff, int32(len(r.a)))
		for d := range 4 {
			if d >= nd {
				r.nrm = append(r.nrm, 0)
				continue
			}
			r.nrm = append(r.nrm, 1)
			delta := float64(d) - 1.5
			offs[I+d] = M - off - 2*c*delta*(mid-float64(J0)) - c*delta*delta
		}
	}
	// The sums at the reference, by the applications' own code; then the
	// normalisation and the logs.
	hornerPass(out, r, b0, n, s.one[:n])
	for i, x := range out {
		r.nrm[4*b0+i] = 1 / x
	}
	logAdd(out, offs, 0)
}

// addIrregular records the block of outputs I.. as per-output windows
// (lo, off, w32) of weights exp(h_j - c (i - j)^2 - offs_i), offs_i the
// output's largest exponent, and the block's j0 as -1 - its first output
// there.
func (r *windows) addIrregular(offs, h []float64, c float64, s *lseScratch, I int) {
	n := len(h)
	r.j0 = append(r.j0, int32(-1-len(r.lo)))
	r.aoff = append(r.aoff, int32(len(r.a)))
	for d := range 4 {
		i := I + d
		if i >= n {
			r.nrm = append(r.nrm, 0)
			r.addScaled(0, nil, 1)
			continue
		}
		r.nrm = append(r.nrm, 1)
		lo, hi := int(s.wlo[i]), int(s.whi[i])
		tt, ee := s.pre[:hi-lo+1], s.ex[:hi-lo+1]
		offs[i] = exponents(tt, h[lo:], float64(i-lo), c)
		expShift(ee, tt, s.zero[:len(tt)], offs[i])
		r.addScaled(lo, ee, 1)
	}
}

// exponents writes t[k] = h[k] - c (center - k)^2 (-Inf where h is) and
// returns the largest.
func exponents(t, h []float64, center, c float64) float64 {
	ninf := math.Inf(-1)
	m := ninf
	for k := range t {
		t[k] = ninf
		if h[k] != ninf {
			y := center - float64(k)
			t[k] = h[k] - c*y*y
			m = max(m, t[k])
		}
	}
	return m
}

// addEmptyBlocks records the blocks of a line without finite inputs: no
// coefficients, and zero sums.
func (r *windows) addEmptyBlocks(n int) {
	for I := 0; I < n; I += 4 {
		r.j0 = append(r.j0, 0)
		r.aoff = append(r.aoff, int32(len(r.a)))
		r.nrm = append(r.nrm, 0, 0, 0, 0)
	}
}

// hornerPass writes out[i] = nrm_i sum_e A_e x[J0 + e] rho_d^e for the n
// outputs of one line whose blocks start at block b0 of r: runs of whole
// regular blocks in assembly where there is some (hornerBlocks), the rest
// by hornerBlockGo.
func hornerPass(out []float64, r *windows, b0, n int, x []float64) {
	nb, full := (n+3)/4, n/4
	for b := 0; b < nb; {
		if b < full {
			if k := hornerBlocks(out[4*b:], r, b0+b, full-b, x); k > 0 {
				b += k
				continue
			}
		}
		hornerBlockGo(out, r, b0+b, 4*b, n, x)
		b++
	}
}

// hornerBlockGo is one block of hornerPass without assembly (b counts from
// the band's first block, I from the line's first output), summed as the
// assembly sums; an irregular block takes its per-output windows.
func hornerBlockGo(out []float64, r *windows, b, I, n int, x []float64) {
	if r.j0[b] < 0 {
		q := int(-1 - r.j0[b])
		for d := 0; d < min(4, n-I); d++ {
			w := r.w32[r.off[q+d]:r.off[q+d+1]]
			out[I+d] = r.nrm[4*b+d] * dotWindow(w, x[r.lo[q+d]:])
		}
		return
	}
	a := r.a[r.aoff[b]:r.aoff[b+1]]
	J0 := int(r.j0[b])
	for d := 0; d < min(4, n-I); d++ {
		var s [2][4]float64
		for k := 0; k < len(a); k += 4 {
			p := r.hp[4*k+4*d:]
			for l := range 4 {
				s[k/4%2][l] += float64(a[k+l]) * x[J0+k+l] * p[l]
			}
		}
		out[I+d] = r.nrm[4*b+d] * (((s[0][0] + s[1][0]) + (s[0][1] + s[1][1])) + ((s[0][2] + s[1][2]) + (s[0][3] + s[1][3])))
	}
}
