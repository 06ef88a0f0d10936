package ensemble

import (
	"errors"
	"fmt"
	"math"
	"sort"

	"barygrid/gaussfit"
	"barygrid/grid"
	"barygrid/internal/parallel"
	"barygrid/sinkhorn"
)

// PixelMean returns the plain average of the fields, each normalised to
// unit mass: the blurry reference a barycenter is compared with. Fields
// without mass are an error.
func PixelMean(fs []*grid.Field) (*grid.Field, error) {
	if len(fs) == 0 {
		return nil, errors.New("ensemble: no fields")
	}
	if err := grid.SameShape(fs, nil); err != nil {
		return nil, err
	}
	m := fs[0].Like()
	for i, f := range fs {
		g, err := grid.Normalize(f)
		if err != nil {
			return nil, fmt.Errorf("ensemble: field %d: %w", i+1, err)
		}
		for j, v := range g.Data {
			m.Data[j] += v / float64(len(fs))
		}
	}
	return m, nil
}

// Kind selects the distance.
type Kind int

const (
	// SinkhornDivergence is the debiased entropic transport cost
	// (sinkhorn.Divergence), in squared physical units.
	SinkhornDivergence Kind = iota
	// UnbalancedDivergence lets the masses differ (sinkhorn.UnbalancedDivergence
	// with Settings.Solver.Unbalanced as the penalty).
	UnbalancedDivergence
	// GaussianW2 is the closed-form squared 2-Wasserstein distance between
	// the fields' fitted Gaussians (Dowson & Landau 1982).
	GaussianW2
)

func (k Kind) String() string {
	switch k {
	case UnbalancedDivergence:
		return "unbalanced-sinkhorn-divergence"
	case GaussianW2:
		return "gaussian-w2-squared"
	}
	return "sinkhorn-divergence"
}

// DistanceSettings of Distance, Matrix and Rank. The zero value is the
// Sinkhorn divergence with the solver's defaults.
type DistanceSettings struct {
	Kind Kind
	// Solver settings for the divergences; Weights, Mask and Warm are not
	// used, Unbalanced is the penalty of UnbalancedDivergence.
	Solver sinkhorn.Settings
}

// Distance is one distance with how it was reached.
type Distance struct {
	Value float64
	Kind  Kind
	// Epsilon actually used (0 for GaussianW2).
	Epsilon float64
	// Iterations of the three transport problems of a divergence
	// (a to b, a to a, b to b).
	Iterations []int
}

// Between returns the distance between two fields of one shape.
func Between(a, b *grid.Field, s DistanceSettings) (Distance, error) {
	out := Distance{Kind: s.Kind}
	if s.Kind == GaussianW2 {
		ga, _, err := gaussfit.Fit(a, gaussfit.FitSettings{})
		if err != nil {
			return out, err
		}
		gb, _, err := gaussfit.Fit(b, gaussfit.FitSettings{})
		if err != nil {
			return out, err
		}
		out.Value = gaussfit.W2Sq(ga, gb)
		return out, nil
	}
	var (
		rs  []*sinkhorn.TransportResult
		err error
	)
	ss := s.Solver
	ss.Progress = nil
	if s.Kind == UnbalancedDivergence {
		out.Value, rs, err = sinkhorn.UnbalancedDivergence(a, b, ss.Unbalanced, ss)
	} else {
		ss.Unbalanced = 0
		out.Value, rs, err = sinkhorn.Divergence(a, b, ss)
	}
	for _, r := range rs {
		if r == nil {
			continue
		}
		out.Iterations = append(out.Iterations, r.Iterations)
		out.Epsilon = r.Epsilon
		if err == nil && r.Status != sinkhorn.Converged {
			err = fmt.Errorf("ensemble: transport did not converge: %s", r.Message)
		}
	}
	return out, err
}

// Matrix returns the pairwise distances of the fields, computed in parallel
// (Solver.Workers bounds the goroutines), with a zero diagonal.
func Matrix(fs []*grid.Field, s DistanceSettings) ([][]float64, error) {
	n := len(fs)
	m := make([][]float64, n)
	for i := range m {
		m[i] = make([]float64, n)
	}
	var pairs [][2]int
	for i := 0; i < n; i++ {
		for j := i + 1; j < n; j++ {
			pairs = append(pairs, [2]int{i, j})
		}
	}
	errs := make([]error, len(pairs))
	inner := s
	inner.Solver.Workers = 1
	parallel.For(len(pairs), s.Solver.Workers, func(k int) {
		i, j := pairs[k][0], pairs[k][1]
		d, err := Between(fs[i], fs[j], inner)
		if err != nil {
			errs[k] = fmt.Errorf("fields %d and %d: %w", i+1, j+1, err)
		}
		m[i][j], m[j][i] = d.Value, d.Value
	})
	return m, errors.Join(errs...)
}

// Rank is one input's place in a ranking.
type Rank struct {
	// Index of the input in the slice given to RankInputs.
	Index      int
	Divergence float64
	// Score is the robust z-score (divergence - median) / (1.4826 MAD).
	Score   float64
	Outlier bool
}

// OutlierScore is the robust z-score above which an input is flagged
// (Hampel's rule: median + 3 scaled median absolute deviations; Hampel
// 1974, Leys et al. 2013).
const OutlierScore = 3.0

// RankInputs returns each input's distance to the barycenter, largest
// first, with outliers flagged by Hampel's rule; robust because the
// outliers themselves barely move the median.
func RankInputs(fs []*grid.Field, bary *grid.Field, s DistanceSettings) ([]Rank, error) {
	out := make([]Rank, len(fs))
	errs := make([]error, len(fs))
	inner := s
	inner.Solver.Workers = 1
	parallel.For(len(fs), s.Solver.Workers, func(i int) {
		d, err := Between(fs[i], bary, inner)
		out[i] = Rank{Index: i, Divergence: d.Value}
		if err != nil {
			errs[i] = fmt.Errorf("field %d: %w", i+1, err)
		}
	})
	if err := errors.Join(errs...); err != nil {
		return nil, err
	}
	ds := make([]float64, len(out))
	for i, e := range out {
		ds[i] = e.Divergence
	}
	med := median(ds)
	dev := make([]float64, len(ds))
	for i, d := range ds {
		dev[i] = math.Abs(d - med)
	}
	mad := median(dev) / 0.6745
	for i := range out {
		if mad > 0 {
			out[i].Score = (out[i].Divergence - med) / mad
		}
		out[i].Outlier = mad > 0 && out[i].Score > OutlierScore
	}
	sort.SliceStable(out, func(i, j int) bool { return out[i].Divergence > out[j].Divergence })
	return out, nil
}

func median(xs []float64) float64 {
	s := append([]float64(nil), xs...)
	sort.Float64s(s)
	n := len(s)
	if n == 0 {
		return 0
	}
	if n%2 == 1 {
		return s[n/2]
	}
	return (s[n/2-1] + s[n/2]) / 2
}

// MorphSettings of Morph. The zero value gives 9 frames of entropic
// barycenters with the solver's defaults.
type MorphSettings struct {
	// Frames is the number of frames, t from 0 to 1; zero means 9.
	Frames int
	// Gaussian interpolates the fitted Gaussians along the Bures-Wasserstein
	// geodesic instead (McCann interpolation of Gaussians).
	Gaussian bool
	// Solver settings of the barycenters; Weights and Warm are set per frame.
	Solver sinkhorn.Settings
}

// MorphResult is the sequence and the work it took.
type MorphResult struct {
	Frames     []*grid.Field
	Iterations int
}

// Morph returns the displacement interpolation from a to b (McCann 1997):
// frame t is the barycenter with weights (1 - t, t), each warm-started from
// the previous frame, which is close, so the sequence costs a fraction of
// cold solves.
func Morph(a, b *grid.Field, s MorphSettings) (*MorphResult, error) {
	n := s.Frames
	if n == 0 {
		n = 9
	}
	if n < 2 {
		return nil, fmt.Errorf("ensemble: %d frames, want at least 2", n)
	}
	res := &MorphResult{Frames: make([]*grid.Field, n)}
	var ga, gb gaussfit.Gaussian
	var err error
	if s.Gaussian {
		if ga, _, err = gaussfit.Fit(a, gaussfit.FitSettings{}); err != nil {
			return nil, fmt.Errorf("field 1: %w", err)
		}
		if gb, _, err = gaussfit.Fit(b, gaussfit.FitSettings{}); err != nil {
			return nil, fmt.Errorf("field 2: %w", err)
		}
	}
	dx, dy := a.PixelSize()
	ss := s.Solver
	ss.Progress = nil
	var warm *sinkhorn.WarmStart
	for i := 0; i < n; i++ {
		t := float64(i) / float64(n-1)
		if s.Gaussian {
			res.Frames[i] = gaussfit.Render(gaussfit.Geodesic(ga, gb, t), a.Rows, a.Cols, dx, dy, 1)
			continue
		}
		if (t == 0 || t == 1) && s.Solver.Unbalanced == 0 && s.Solver.Mask == nil {
			// The end frames are the inputs themselves.
			if res.Frames[i], err = grid.Normalize([]*grid.Field{a, b}[int(t)]); err != nil {
				return nil, err
			}
			continue
		}
		ss.Weights = []float64{1 - t, t}
		ss.Warm = warm
		r, err := sinkhorn.Barycenter([]*grid.Field{a, b}, ss)
		if err != nil {
			return nil, err
		}
		res.Iterations += r.Iterations
		if r.Status != sinkhorn.Converged {
			return nil, fmt.Errorf("ensemble: frame %d (t = %.3g) did not converge: %s", i, t, r.Message)
		}
		res.Frames[i], warm = r.Barycenter, r.Warm
	}
	return res, nil
}
