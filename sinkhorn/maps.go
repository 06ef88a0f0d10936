package sinkhorn

import (
	"errors"
	"fmt"
	"math"

	"barygrid/grid"
	"barygrid/internal/parallel"
)

// Displacement is where one input's mass sits relative to the barycenter:
// the barycentric map T from the barycenter to the input, estimated as the
// conditional mean of the converged entropic plan P (Brenier's map in the
// limit of small epsilon; Pooladian & Niles-Weed 2021 for the entropic
// estimate),
//
//	T(y) = sum_x x P(x, y) / sum_x P(x, y),
//
// and the displacement T(y) - y in physical units at every pixel y of the
// barycenter's grid.
type Displacement struct {
	// X and Y are the displacement's components (x along columns, y along
	// rows), zero where the barycenter has no mass.
	X, Y *grid.Field
	// MeanSquare is the mean of |T(y) - y|^2 over the plan's second
	// marginal (normalised): how far, in squared physical units, this input
	// sits from the barycenter.
	MeanSquare float64
}

// Variation is what the displacements say together.
type Variation struct {
	Displacements []Displacement
	// Variability is the weighted mean displacement length sum_k w_k
	// |T_k(y) - y| at each pixel: where the inputs differ in position. It
	// is zero where the barycenter holds less than a hundredth of its peak:
	// there the maps extrapolate and would swamp the picture.
	Variability *grid.Field
	// Spread is sum_k w_k MeanSquare_k, the weighted mean squared transport
	// distance of the inputs to the barycenter (squared physical units):
	// for shifted copies of one shape, the variance of the shifts.
	Spread float64
}

// Maps returns the displacements of the inputs from a barycenter result
// computed with the same fields and settings. It costs three log-domain
// kernel applications per input (the plan's second marginal and its first
// moments along x and y), no new solve.
func Maps(fields []*grid.Field, s Settings, r *Result) (*Variation, error) {
	if r == nil || r.Warm == nil || r.Barycenter == nil {
		return nil, errors.New("sinkhorn: maps need a finished barycenter result")
	}
	s.Warm = nil
	p, err := setup(fields, s)
	if err != nil {
		return nil, err
	}
	if r.Warm.rows != p.rows || r.Warm.cols != p.cols || len(r.Warm.g) != len(p.a) || r.Warm.eps != p.eps {
		return nil, fmt.Errorf("%w: the result is not for these fields and settings", ErrInput)
	}
	K := len(p.a)
	k := newLogKernel(p.rows, p.cols, p.dx, p.dy, p.eps)
	out := &Variation{Displacements: make([]Displacement, K), Variability: grid.New(p.rows, p.cols)}
	errs := make([]error, K)
	parallel.For(K, p.workers, func(i int) {
		out.Displacements[i], errs[i] = p.displacement(k, i, r.Warm.g[i])
	})
	if err := errors.Join(errs...); err != nil {
		return nil, err
	}
	_, top := r.Barycenter.MinMax()
	for i, d := range out.Displacements {
		out.Spread += p.w[i] * d.MeanSquare
		for j := range out.Variability.Data {
			if r.Barycenter.Data[j] >= 0.01*top {
				out.Variability.Data[j] += p.w[i] * math.Hypot(d.X.Data[j], d.Y.Data[j])
			}
		}
	}
	dx, dy := fields[0].PixelSize()
	out.Variability.Dx, out.Variability.Dy, out.Variability.Unit = dx, dy, fields[0].Unit
	return out, nil
}

// displacement computes one input's map from its potential g (epsilon
// times log v) at the target epsilon.
func (p *problem) displacement(k *logKernel, i int, g []float64) (Displacement, error) {
	n := p.n
	G := make([]float64, n)
	for j, x := range g {
		G[j] = x / p.eps
	}
	s := newLSEScratch(p.rows, p.cols)
	tmp, lkv := make([]float64, n), make([]float64, n)
	k.apply(lkv, G, tmp, s)
	// F = lambda (log a - log K v), the plan's first potential.
	la := logOf(p.a[i])
	F := make([]float64, n)
	for j := range F {
		F[j] = p.lambda * (la[j] - lkv[j])
		if math.IsInf(la[j], -1) {
			F[j] = math.Inf(-1)
		}
	}
	// log sum_x P(x, y) - G(y), and the same with x' = x + (pixel) and
	// y' = y + (pixel), shifted so that the logs of the coordinates exist.
	den, nx, ny := make([]float64, n), make([]float64, n), make([]float64, n)
	k.apply(den, F, tmp, s)
	h := make([]float64, n)
	for j := range h {
		h[j] = F[j] + math.Log(float64(j%p.cols+1)*p.dx)
	}
	k.apply(nx, h, tmp, s)
	for j := range h {
		h[j] = F[j] + math.Log(float64(j/p.cols+1)*p.dy)
	}
	k.apply(ny, h, tmp, s)
	d := Displacement{X: grid.New(p.rows, p.cols), Y: grid.New(p.rows, p.cols)}
	d.X.Dx, d.X.Dy, d.Y.Dx, d.Y.Dy = p.dx, p.dy, p.dx, p.dy
	// The plan's second marginal nu(y) = exp(G(y) + den(y)), normalised.
	m := math.Inf(-1)
	for j := range den {
		if p.mask == nil || p.mask[j] {
			m = math.Max(m, G[j]+den[j])
		}
	}
	var wsum, msq float64
	for j := range den {
		if math.IsInf(den[j], -1) || math.IsInf(G[j], -1) || (p.mask != nil && !p.mask[j]) {
			continue
		}
		x, y := float64(j%p.cols)*p.dx, float64(j/p.cols)*p.dy
		tx := math.Exp(nx[j]-den[j]) - p.dx // undo the shift of x' = x + dx
		ty := math.Exp(ny[j]-den[j]) - p.dy
		d.X.Data[j], d.Y.Data[j] = tx-x, ty-y
		w := math.Exp(G[j] + den[j] - m)
		wsum += w
		msq += w * (d.X.Data[j]*d.X.Data[j] + d.Y.Data[j]*d.Y.Data[j])
	}
	if !(wsum > 0) {
		return d, fmt.Errorf("sinkhorn: input %d: its plan has no mass", i+1)
	}
	d.MeanSquare = msq / wsum
	return d, nil
}

// Carry averages a second field per input (a second stain, a second
// variable) in the barycenter's frame: each input's carried field is
// moved along its plan, c~_k(y) = sum_x c_k(x) P_k(x, y) / sum_x P_k(x, y)
// (the value found where the barycenter's point y comes from in input k),
// and the weighted mean over inputs is returned: the average of what sits
// where on the average shape. carried[k] must have the shape of fields[k];
// the result has the barycenter's grid and the carried fields' unit. Two
// kernel applications per input, no new solve.
func Carry(fields, carried []*grid.Field, s Settings, r *Result) (*grid.Field, error) {
	if r == nil || r.Warm == nil || r.Barycenter == nil {
		return nil, errors.New("sinkhorn: carrying needs a finished barycenter result")
	}
	if len(carried) != len(fields) {
		return nil, fmt.Errorf("%w: %d carried fields for %d inputs", ErrInput, len(carried), len(fields))
	}
	s.Warm = nil
	p, err := setup(fields, s)
	if err != nil {
		return nil, err
	}
	if r.Warm.rows != p.rows || r.Warm.cols != p.cols || len(r.Warm.g) != len(p.a) || r.Warm.eps != p.eps {
		return nil, fmt.Errorf("%w: the result is not for these fields and settings", ErrInput)
	}
	for k, c := range carried {
		if c.Rows != p.rows || c.Cols != p.cols {
			return nil, fmt.Errorf("%w: carried field %d is %dx%d, its input %dx%d", ErrInput, k+1, c.Rows, c.Cols, p.rows, p.cols)
		}
		if err := c.Validate(); err != nil {
			return nil, fmt.Errorf("carried field %d: %w", k+1, err)
		}
	}
	kern := newLogKernel(p.rows, p.cols, p.dx, p.dy, p.eps)
	each := make([][]float64, len(p.a))
	parallel.For(len(p.a), p.workers, func(k int) {
		n := p.n
		sc := newLSEScratch(p.rows, p.cols)
		tmp, lkv, den, num := make([]float64, n), make([]float64, n), make([]float64, n), make([]float64, n)
		G := make([]float64, n)
		for j, x := range r.Warm.g[k] {
			G[j] = x / p.eps
		}
		kern.apply(lkv, G, tmp, sc)
		F, h := make([]float64, n), make([]float64, n)
		for j, a := range p.a[k] {
			F[j] = math.Inf(-1)
			if a > 0 {
				F[j] = p.lambda * (math.Log(a) - lkv[j])
			}
			h[j] = F[j] + math.Log(carried[k].Data[j])
		}
		kern.apply(den, F, tmp, sc)
		kern.apply(num, h, tmp, sc)
		out := make([]float64, n)
		for j := range out {
			if !math.IsInf(den[j], -1) && !math.IsInf(num[j], -1) {
				out[j] = math.Exp(num[j] - den[j])
			}
		}
		each[k] = out
	})
	res := grid.New(p.rows, p.cols)
	for k, e := range each {
		for j, v := range e {
			res.Data[j] += p.w[k] * v
		}
	}
	res.Dx, res.Dy, res.Unit = fields[0].Dx, fields[0].Dy, fields[0].Unit
	return res, nil
}
