package sinkhorn

import "math"

// LogKernel applies the kernel in the log domain:
//
//	dst(p) = log sum_q exp(src(q) - |p - q|^2 / epsilon)
//
// separably, as two 1-D log-sum-exp passes, each with its own max shift per
// output, so that no value under- or overflows whatever the range of src
// (the remedy of Chizat, Peyre, Schmitzer, Vialard 2018 and Schmitzer 2019
// for small epsilon). Terms more than logDrop below the largest term of an
// output are skipped: they change the result by less than n*exp(-logDrop).
// Block maxima of src bound whole blocks of terms, so most of the work is a
// few exps per output rather than one per pixel of the row.
type LogKernel struct {
	Rows, Cols int
	qx, qy     []float64 // q[t] = (h t)^2 / eps
}

const (
	logDrop = 40.0
	blk     = 8
)

// NewLogKernel returns the log-domain kernel for the grid and epsilon.
func NewLogKernel(rows, cols int, dx, dy, eps float64) *LogKernel {
	q := func(n int, h float64) []float64 {
		out := make([]float64, n)
		for t := range out {
			d := h * float64(t)
			out[t] = d * d / eps
		}
		return out
	}
	return &LogKernel{Rows: rows, Cols: cols, qx: q(cols, dx), qy: q(rows, dy)}
}

// Apply writes the log-domain kernel of src to dst; tmp is scratch of the
// same size. -Inf entries in src stand for zero mass.
func (k *LogKernel) Apply(dst, src, tmp []float64) {
	// Along x on rows, then transpose so that y is contiguous too.
	lseRows(tmp, src, k.Rows, k.Cols, k.qx)
	transpose(dst, tmp, k.Rows, k.Cols)
	lseRows(tmp, dst, k.Cols, k.Rows, k.qy)
	transpose(dst, tmp, k.Cols, k.Rows)
}

func transpose(dst, src []float64, rows, cols int) {
	const b = 32
	for r0 := 0; r0 < rows; r0 += b {
		for c0 := 0; c0 < cols; c0 += b {
			for r := r0; r < min(r0+b, rows); r++ {
				for c := c0; c < min(c0+b, cols); c++ {
					dst[c*rows+r] = src[r*cols+c]
				}
			}
		}
	}
}

// lseRows computes, for each row, out[c'] = log sum_c exp(in[c] - q[|c-c'|]).
func lseRows(dst, src []float64, rows, n int, q []float64) {
	nb := (n + blk - 1) / blk
	bmax := make([]float64, nb)
	bnd := make([]float64, nb)
	ninf := math.Inf(-1)
	q = q[:n]
	for r := 0; r < rows; r++ {
		in := src[r*n : (r+1)*n]
		out := dst[r*n : (r+1)*n]
		for j := range bmax {
			m := ninf
			for _, v := range in[j*blk : min((j+1)*blk, n)] {
				if v > m {
					m = v
				}
			}
			bmax[j] = m
		}
		for c := range out {
			// Block j spans [j*blk, (j+1)*blk); its point nearest to c bounds
			// every term of the block by bmax[j] - q[dist].
			jc := c / blk
			for j := range bnd {
				d := 0
				if lo := j * blk; c < lo {
					d = lo - c
				} else if hi := min((j+1)*blk, n) - 1; c > hi {
					d = c - hi
				}
				bnd[j] = bmax[j] - q[d]
			}
			best := ninf
			for j := -1; j < nb; j++ {
				jj := j
				if j == -1 {
					jj = jc // the block holding c first: a good best early
				} else if j == jc || bnd[j] <= best {
					continue
				}
				lo, hi := jj*blk, min((jj+1)*blk, n)
				for i := lo; i < hi; i++ {
					d := i - c
					if d < 0 {
						d = -d
					}
					if t := in[i] - q[d]; t > best {
						best = t
					}
				}
			}
			if best == ninf {
				out[c] = ninf
				continue
			}
			floor := best - logDrop
			var s float64
			for j := 0; j < nb; j++ {
				if bnd[j] < floor {
					continue
				}
				lo, hi := j*blk, min((j+1)*blk, n)
				for i := lo; i < hi; i++ {
					d := i - c
					if d < 0 {
						d = -d
					}
					if t := in[i] - q[d] - best; t > -logDrop {
						s += math.Exp(t)
					}
				}
			}
			out[c] = best + math.Log(s)
		}
	}
}
