package gaussfit

import (
	"errors"
	"fmt"
	"io"
	"math"
	"time"

	"gonum.org/v1/gonum/mat"
)

// Source yields weighted Gaussians one at a time; Next returns io.EOF after
// the last.
type Source interface {
	Next() (g Gaussian, weight float64, err error)
}

// StreamSettings of Stream. The zero value makes one pass with the
// running-mean step.
type StreamSettings struct {
	// Passes over the source; zero means 1.
	Passes int
	// Step, when positive, is the first step of eta_t = Step / sqrt(t);
	// zero means eta_t = w_t / W_t, the running weighted mean's step (W_t
	// the weight seen so far, over all passes).
	Step float64
	// Start is the initial covariance; nil means the first fit's.
	Start *mat.SymDense
}

// StreamResult is the barycenter a stream gave.
type StreamResult struct {
	Barycenter Gaussian
	// Fits is the number of fits in one pass; Passes the passes made.
	Fits, Passes int
	// Objective estimates sum_k w_k W2^2(N_k, barycenter) / sum_k w_k from
	// the last pass, each fit measured against the running estimate just
	// before its step (a slight overestimate early in the pass).
	Objective float64
	Elapsed   time.Duration
}

// Stream computes the Bures-Wasserstein barycenter of the Gaussians that
// open yields by stochastic gradient descent, one fit per step, in memory
// that does not grow with their number (Chewi, Maunu, Rigollet, Stromme
// 2020 for the method; the step w_t / W_t makes one pass the running mean
// in the commuting case). Each pass calls open for a fresh source, so a file
// can be read again; a source that cannot be reopened allows one pass.
func Stream(open func() (Source, error), s StreamSettings) (*StreamResult, error) {
	start := time.Now()
	passes := s.Passes
	if passes == 0 {
		passes = 1
	}
	if passes < 0 {
		return nil, fmt.Errorf("gaussfit: %d passes", passes)
	}
	var (
		S      *mat.SymDense
		mean   []float64
		d      int
		W      float64 // weight seen, all passes
		t      int
		res    = &StreamResult{}
		sumObj float64
		sumW   float64
	)
	if s.Start != nil {
		S = mat.NewSymDense(s.Start.SymmetricDim(), nil)
		S.CopySym(s.Start)
	}
	for p := 0; p < passes; p++ {
		src, err := open()
		if err != nil {
			return nil, err
		}
		n := 0
		sumObj, sumW = 0, 0
		var meanW float64 // weight seen in this pass, for the mean
		passMean := []float64(nil)
		for {
			g, w, err := src.Next()
			if errors.Is(err, io.EOF) {
				break
			}
			if err != nil {
				return nil, err
			}
			if !(w >= 0) || math.IsInf(w, 0) {
				return nil, fmt.Errorf("gaussfit: fit %d has weight %g", n+1, w)
			}
			if S == nil {
				d = len(g.Mean)
				S = mat.NewSymDense(d, nil)
				S.CopySym(g.Cov)
			}
			if d == 0 {
				d = S.SymmetricDim()
			}
			if len(g.Mean) != d || g.Cov == nil || g.Cov.SymmetricDim() != d {
				return nil, fmt.Errorf("gaussfit: fit %d is not of dimension %d", n+1, d)
			}
			n++
			if w == 0 {
				continue
			}
			if passMean == nil {
				passMean = make([]float64, d)
			}
			if p == passes-1 && (p > 0 || meanW > 0) {
				// Against the previous pass's mean, or the running one.
				ref := mean
				if p == 0 {
					ref = passMean
				}
				var dm float64
				for i := range ref {
					dm += (g.Mean[i] - ref[i]) * (g.Mean[i] - ref[i])
				}
				sumObj += w * (dm + BuresSq(g.Cov, S))
				sumW += w
			}
			// The mean is the weighted mean of the means, exactly; it is
			// recomputed each pass.
			meanW += w
			for i := range passMean {
				passMean[i] += w / meanW * (g.Mean[i] - passMean[i])
			}
			W += w
			t++
			eta := w / W
			if s.Step > 0 {
				eta = s.Step / math.Sqrt(float64(t))
			}
			S = moveAlong(S, OptimalMap(S, g.Cov), eta)
		}
		if n == 0 {
			return nil, errors.New("gaussfit: the stream holds no Gaussians")
		}
		if p > 0 && n != res.Fits {
			return nil, fmt.Errorf("gaussfit: pass %d read %d fits, the first %d", p+1, n, res.Fits)
		}
		res.Fits, res.Passes = n, p+1
		if passMean != nil {
			mean = passMean
		}
	}
	if mean == nil {
		return nil, errors.New("gaussfit: every fit has weight zero")
	}
	for i := 0; i < d; i++ {
		for j := 0; j < d; j++ {
			if x := S.At(i, j); math.IsNaN(x) || math.IsInf(x, 0) {
				return nil, fmt.Errorf("%w: the covariance became non-finite", ErrNumerical)
			}
		}
	}
	if sumW > 0 {
		res.Objective = sumObj / sumW
	}
	res.Barycenter = Gaussian{Mean: mean, Cov: S}
	res.Elapsed = time.Since(start)
	return res, nil
}

// SliceSource yields the Gaussians of a slice (weights nil: equal).
func SliceSource(gs []Gaussian, weights []float64) Source {
	return &sliceSource{gs: gs, w: weights}
}

type sliceSource struct {
	gs []Gaussian
	w  []float64
	i  int
}

func (s *sliceSource) Next() (Gaussian, float64, error) {
	if s.i >= len(s.gs) {
		return Gaussian{}, 0, io.EOF
	}
	s.i++
	w := 1.0
	if s.w != nil {
		w = s.w[s.i-1]
	}
	return s.gs[s.i-1], w, nil
}
