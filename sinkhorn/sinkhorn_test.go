package sinkhorn

import (
	"math"
	"math/rand/v2"
	"sort"
	"testing"

	"barygrid/grid"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/optimize/convex/lp"
)

// gaussField samples exp(-|p - m|^2 / (2 s2)) on a rows x cols grid.
func gaussField(rows, cols int, mx, my, s2 float64) *grid.Field {
	f := grid.New(rows, cols)
	for r := 0; r < rows; r++ {
		for c := 0; c < cols; c++ {
			x, y := float64(c)-mx, float64(r)-my
			f.Set(r, c, math.Exp(-(x*x+y*y)/(2*s2)))
		}
	}
	return f
}

// The separable kernel equals the dense N x N Gibbs kernel built from the
// definition K(p, q) = exp(-|p - q|^2/eps), anisotropic pixels included.
func TestSeparableEqualsDense(t *testing.T) {
	// 5 x 7 takes the portable passes; 9 x 45 the blocked ones with their
	// row and column tails: bandPass along y, and along x conv1d with a
	// band of 18 taps on either side (cutoff 1e-30: the terms it leaves
	// out are below 1e-30 of the largest), transposes and bandPass with
	// the full band of 44 (beyond conv1dReach).
	for _, c := range []struct {
		rows, cols int
		cutoff     float64
	}{{5, 7, 0}, {9, 45, 0}, {9, 45, 1e-30}} {
		separableEqualsDense(t, c.rows, c.cols, c.cutoff)
	}
}

func separableEqualsDense(t *testing.T, rows, cols int, cutoff float64) {
	dx, dy, eps := 0.7, 1.3, 2.5
	f := grid.New(rows, cols)
	for i := range f.Data {
		f.Data[i] = 1 + math.Sin(float64(i))
	}
	dense := make([]float64, rows*cols)
	for p := range dense {
		for q := range dense {
			ddx := dx * float64(p%cols-q%cols)
			ddy := dy * float64(p/cols-q/cols)
			dense[p] += math.Exp(-(ddx*ddx+ddy*ddy)/eps) * f.Data[q]
		}
	}
	got, tmp := make([]float64, rows*cols), make([]float64, rows*cols)
	k := newBandKernel(rows, cols, dx, dy, eps, cutoff)
	if cols == 45 && (k.rx <= conv1dReach) != (cutoff > 0) {
		t.Fatalf("cutoff %g: band of %d taps on either side, not the pass meant", cutoff, k.rx)
	}
	k.Apply(got, f.Data, tmp)
	logf := make([]float64, rows*cols)
	for i, v := range f.Data {
		logf[i] = math.Log(v)
	}
	lgot := make([]float64, rows*cols)
	newLogKernel(rows, cols, dx, dy, eps).apply(lgot, logf, tmp, newLSEScratch(rows, cols))
	for i := range dense {
		if math.Abs(got[i]-dense[i]) > 1e-12*dense[i] {
			t.Errorf("scaling kernel at %d: %.15g, dense %.15g", i, got[i], dense[i])
		}
		if math.Abs(math.Exp(lgot[i])-dense[i]) > 1e-12*dense[i] {
			t.Errorf("log kernel at %d: %.15g, dense %.15g", i, math.Exp(lgot[i]), dense[i])
		}
	}
}

// transportLP returns the exact squared-W2 cost between a and b on the grid
// (gonum's simplex on the Kantorovich LP; Peyre & Cuturi 2019, ch. 3).
func transportLP(t *testing.T, a, b []float64, cost [][]float64) float64 {
	n := len(a)
	A := mat.NewDense(2*n-1, n*n, nil)
	rhs := make([]float64, 2*n-1)
	c := make([]float64, n*n)
	for i := 0; i < n; i++ {
		for j := 0; j < n; j++ {
			c[i*n+j] = cost[i][j]
			A.Set(i, i*n+j, 1)
			if j < n-1 { // the last column sum is implied by the masses
				A.Set(n+j, i*n+j, 1)
			}
		}
		rhs[i] = a[i]
	}
	for j := 0; j < n-1; j++ {
		rhs[n+j] = b[j]
	}
	opt, _, err := lp.Simplex(c, A, rhs, 1e-12, nil)
	if err != nil {
		t.Fatalf("transport LP: %v", err)
	}
	return opt
}

// On a 4 x 4 grid the fixed-support W2 barycenter is a linear programme
// (Peyre & Cuturi, Computational Optimal Transport, 2019, sec. 9.2):
// minimise sum_k w_k <C, P_k> over plans P_k with rows a_k and common
// columns b. Its optimum bounds every candidate's objective
// sum_k w_k W2^2(a_k, b) from below; the entropic barycenter's objective
// approaches it as epsilon falls, and debiasing brings it closer at fixed
// epsilon (Janati et al. 2020).
func TestAgainstExactLPBarycenter(t *testing.T) {
	const side = 4
	inputs := [][]float64{
		{4, 1, 0, 0, 1, 1, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0},
		{0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 1, 2, 0, 0, 2, 3},
		{0, 0, 1, 3, 0, 0, 0, 2, 0, 0, 0, 0, 0, 0, 0, 0},
	}
	w := []float64{0.5, 0.3, 0.2}
	var fields []*grid.Field
	for i, a := range inputs {
		s := grid.Sum(a)
		for j := range a {
			inputs[i][j] = a[j] / s
		}
		fields = append(fields, &grid.Field{Rows: side, Cols: side, Data: append([]float64(nil), inputs[i]...), Dx: 1, Dy: 1})
	}
	opt := lpBarycenter(t, inputs, w, side, side)
	cost := costMatrix(side, side)
	objective := func(b []float64) float64 {
		var s float64
		for k := range inputs {
			s += w[k] * transportLP(t, inputs[k], b, cost)
		}
		return s
	}
	gap := func(eps float64, plain bool) float64 {
		r, err := Barycenter(fields, Settings{Epsilon: eps, Weights: w, Debias: !plain, Tol: 1e-9, MaxIter: 100000})
		if err != nil || r.Status != Converged {
			t.Fatalf("eps %g plain %v: %v %v", eps, plain, err, r.Message)
		}
		return objective(r.Barycenter.Data) - opt
	}
	var prev = math.Inf(1)
	for _, eps := range []float64{2, 1, 0.5, 0.25} {
		g := gap(eps, true)
		if g < -1e-9 {
			t.Fatalf("eps %g: objective below the LP optimum by %g", eps, -g)
		}
		if g > prev+1e-9 {
			t.Errorf("eps %g: gap %g grew from %g", eps, g, prev)
		}
		prev = g
		t.Logf("eps %.2f plain gap %.4g (LP optimum %.6g)", eps, g, opt)
	}
	if prev > 0.05*opt {
		t.Errorf("at eps 0.25 the plain gap %g exceeds 5%% of the optimum %g", prev, opt)
	}
	// The default epsilon on this 4 x 4 grid, (4/24)^2 squared pixel.
	if g := gap(0, true); g > 0.01*opt {
		t.Errorf("default epsilon: gap %g is over 1%% of the optimum %g", g, opt)
	} else {
		t.Logf("default epsilon: gap %.4g", g)
	}
	for _, eps := range []float64{2, 1} {
		gp, gd := gap(eps, true), gap(eps, false)
		t.Logf("eps %.2f: plain gap %.4g, debiased gap %.4g", eps, gp, gd)
		if gd >= gp {
			t.Errorf("eps %g: debiased gap %g not below plain %g", eps, gd, gp)
		}
	}
}

func cdf(a []float64) []float64 {
	out := make([]float64, len(a))
	var s float64
	for i, v := range a {
		s += v
		out[i] = s
	}
	return out
}

// quantile returns the generalised inverse of a CDF on pixel centres with
// linear interpolation inside each pixel's mass.
func quantile(F []float64, p float64) float64 {
	i := sort.SearchFloat64s(F, p)
	if i >= len(F) {
		return float64(len(F) - 1)
	}
	lo := 0.0
	if i > 0 {
		lo = F[i-1]
	}
	return float64(i) - 0.5 + (p-lo)/math.Max(F[i]-lo, 1e-300)
}

// In one dimension the W2 barycenter's quantile function is the weighted
// mean of the inputs' quantile functions (standard fact; e.g. Agueh &
// Carlier 2011). Compare the W1 distance between the entropic barycenter and
// that reference, which for 1-D is the L1 distance of quantile functions,
// at the default epsilon (one squared pixel): within 0.1 px.
func TestOneDimensionQuantiles(t *testing.T) {
	const n = 120
	a := gaussField(1, n, 30, 0, 16)
	b := grid.New(1, n) // a two-bump field
	for c := 0; c < n; c++ {
		x := float64(c)
		b.Data[c] = math.Exp(-(x-70)*(x-70)/18) + 0.6*math.Exp(-(x-95)*(x-95)/8)
	}
	w := []float64{0.35, 0.65}
	r, err := Barycenter([]*grid.Field{a, b}, Settings{Weights: w, Tol: 1e-8})
	if err != nil || r.Status != Converged {
		t.Fatal(err, r.Message)
	}
	na, _ := grid.Normalize(a)
	nb, _ := grid.Normalize(b)
	Fa, Fb, Fr := cdf(na.Data), cdf(nb.Data), cdf(r.Barycenter.Data)
	var w1 float64
	const m = 4000
	for i := 0; i < m; i++ {
		p := (float64(i) + 0.5) / m
		want := w[0]*quantile(Fa, p) + w[1]*quantile(Fb, p)
		w1 += math.Abs(quantile(Fr, p)-want) / m
	}
	t.Logf("W1 to the quantile-mean barycenter %.4f px", w1)
	if w1 > 0.1 {
		t.Errorf("W1 to the quantile-mean barycenter = %.3f px, want < 0.1", w1)
	}
}

// Shifted copies of one shape: the barycenter is the shape shifted by the
// weighted mean shift (W2 geometry of translations, standard fact). For
// Gaussian blobs of equal variance the debiased barycenter keeps the
// variance, while the plain one inflates it by about epsilon/2 per axis
// (Janati, Cuturi, Gramfort 2020).
func TestTranslationAndDebiasing(t *testing.T) {
	const n, s2, eps = 48, 9.0, 4.0
	shifts := [][2]float64{{16, 18}, {28, 22}, {22, 31}}
	w := []float64{0.2, 0.5, 0.3}
	var fs []*grid.Field
	var mx, my float64
	for i, s := range shifts {
		fs = append(fs, gaussField(n, n, s[0], s[1], s2))
		mx += w[i] * s[0]
		my += w[i] * s[1]
	}
	for _, plain := range []bool{false, true} {
		// The debiasing field converges sublinearly and must reach the
		// tolerance too: ask it for 1e-7.
		tol := map[bool]float64{true: 1e-8, false: 1e-7}[plain]
		r, err := Barycenter(fs, Settings{Epsilon: eps, Weights: w, Debias: !plain, Tol: tol})
		if err != nil || r.Status != Converged {
			t.Fatal(err, r.Message)
		}
		m := grid.ComputeMoments(r.Barycenter)
		if math.Abs(m.Mean[0]-mx) > 1e-3 || math.Abs(m.Mean[1]-my) > 1e-3 {
			t.Errorf("plain=%v: centroid %v, want (%g, %g)", plain, m.Mean, mx, my)
		}
		want := s2
		if plain {
			want += eps / 2
		}
		for i := 0; i < 2; i++ {
			if math.Abs(m.Cov[i][i]-want) > 0.02*want {
				t.Errorf("plain=%v: variance %g, want %g", plain, m.Cov[i][i], want)
			}
		}
		if !plain {
			ref, _ := grid.Normalize(gaussField(n, n, mx, my, s2))
			var l1 float64
			for i := range ref.Data {
				l1 += math.Abs(ref.Data[i] - r.Barycenter.Data[i])
			}
			if l1 > 0.02 {
				t.Errorf("debiased barycenter differs from the shifted shape by L1 %g", l1)
			}
		}
	}
}

// The log-domain iteration solves the same equations as the scaling one:
// where both work their barycenters agree.
func TestLogAgreesWithScaling(t *testing.T) {
	fs := []*grid.Field{gaussField(16, 20, 6, 7, 4), gaussField(16, 20, 13, 9, 7), gaussField(16, 20, 9, 5, 3)}
	for _, plain := range []bool{true, false} {
		// A debiased result converges only when the debiasing field does,
		// which is slower (sublinear): ask it for 1e-8.
		tol := 1e-9
		if !plain {
			tol = 1e-8
		}
		a, err := Barycenter(fs, Settings{Epsilon: 3, Method: MethodScaling, Debias: !plain, Tol: tol})
		if err != nil || a.Status != Converged {
			t.Fatal(err, a.Message)
		}
		b, err := Barycenter(fs, Settings{Epsilon: 3, Method: MethodLog, Debias: !plain, Tol: tol})
		if err != nil || b.Status != Converged {
			t.Fatal(err, b.Message)
		}
		var l1 float64
		for i := range a.Barycenter.Data {
			l1 += math.Abs(a.Barycenter.Data[i] - b.Barycenter.Data[i])
		}
		t.Logf("plain=%v: %d and %d iterations", plain, a.Iterations, b.Iterations)
		if lim := map[bool]float64{true: 1e-7, false: 5e-5}[plain]; l1 > lim {
			t.Errorf("plain=%v: L1 between scaling and log-domain results %g", plain, l1)
		}
	}
}

// At a small epsilon with far-apart inputs the scaling iteration cannot
// represent the scalings; auto must notice and still converge, and the
// debiased barycenter of two translates must still be the midpoint blob.
func TestSmallEpsilonAuto(t *testing.T) {
	fs := []*grid.Field{gaussField(56, 56, 10, 10, 5), gaussField(56, 56, 46, 46, 5)}
	r, err := Barycenter(fs, Settings{Epsilon: 1, Debias: true})
	if err != nil || r.Status != Converged {
		t.Fatal(err, r.Message)
	}
	if r.Method != MethodLog {
		t.Errorf("method %v, want log-domain at epsilon 1 over 31 px", r.Method)
	}
	// The W2 barycenter's mean is the mean of the inputs' means (standard
	// fact); translates keep their variance (debiased, Janati et al. 2020).
	m := grid.ComputeMoments(r.Barycenter)
	m1, m2 := grid.ComputeMoments(fs[0]), grid.ComputeMoments(fs[1])
	for i := 0; i < 2; i++ {
		if want := (m1.Mean[i] + m2.Mean[i]) / 2; math.Abs(m.Mean[i]-want) > 1e-3 {
			t.Errorf("mean[%d] = %g, want %g", i, m.Mean[i], want)
		}
		if want := (m1.Cov[i][i] + m2.Cov[i][i]) / 2; math.Abs(m.Cov[i][i]-want) > 0.02*want {
			t.Errorf("variance[%d] = %g, want %g", i, m.Cov[i][i], want)
		}
	}
	// Forced scaling iteration must report the failure, not a wrong answer.
	s, err := Barycenter(fs, Settings{Epsilon: 1, Method: MethodScaling, MaxIter: 2000})
	if err != nil {
		t.Fatal(err)
	}
	if s.Status == Converged {
		t.Errorf("scaling iteration claims convergence at epsilon 1 over 51 px")
	}
}

// Results do not depend on the number of worker goroutines: on a small
// grid, and in the log domain at epsilon 1, with absorbed kernels rebuilt
// in parallel bands of lines.
func TestThreadsBitIdentical(t *testing.T) {
	for _, c := range []struct {
		rows, cols int
		eps        float64
		method     Method
	}{{20, 26, 4, MethodAuto}, {48, 40, 1, MethodLog}} {
		var fs []*grid.Field
		for i := 0; i < 5; i++ {
			s := float64(c.rows) / 20
			fs = append(fs, gaussField(c.rows, c.cols, s*(6+2*float64(i)), s*(8+float64(i)), s*s*(3+float64(i))))
		}
		var ref []float64
		for _, w := range []int{1, 2, 5} {
			r, err := Barycenter(fs, Settings{Epsilon: c.eps, Workers: w, MaxIter: 300, Method: c.method})
			if err != nil {
				t.Fatal(err)
			}
			if ref == nil {
				ref = r.Barycenter.Data
				continue
			}
			for i := range ref {
				if ref[i] != r.Barycenter.Data[i] {
					t.Fatalf("%dx%d, workers=%d: pixel %d differs (%v vs %v)", c.rows, c.cols, w, i, r.Barycenter.Data[i], ref[i])
				}
			}
		}
	}
}

func TestBadSettings(t *testing.T) {
	fs := []*grid.Field{gaussField(5, 5, 2, 2, 1)}
	for _, s := range []Settings{{Epsilon: -1}, {Weights: []float64{1, 2}}, {Weights: []float64{-1}}, {Relax: 2.5}, {Tol: -1}} {
		if _, err := Barycenter(fs, s); err == nil {
			t.Errorf("settings %+v accepted", s)
		}
	}
	if _, err := Barycenter([]*grid.Field{gaussField(5, 5, 2, 2, 1), gaussField(5, 6, 2, 2, 1)}, Settings{}); err == nil {
		t.Error("mismatched shapes accepted")
	}
}

// A warm start from a neighbouring problem (weights 0.5/0.5 -> 0.6/0.4)
// reaches the same barycenter as a cold start, in fewer iterations (plain
// barycenter: the debiased one's slow debiasing mode gains less).
func TestWarmStart(t *testing.T) {
	fs := []*grid.Field{gaussField(24, 30, 8, 9, 5), gaussField(24, 30, 20, 14, 7)}
	for _, m := range []Method{MethodScaling, MethodLog} {
		first, err := Barycenter(fs, Settings{Epsilon: 2, Weights: []float64{0.5, 0.5}, Method: m, Tol: 1e-8})
		if err != nil {
			t.Fatal(err)
		}
		cold, _ := Barycenter(fs, Settings{Epsilon: 2, Weights: []float64{0.6, 0.4}, Method: m, Tol: 1e-8})
		warm, _ := Barycenter(fs, Settings{Epsilon: 2, Weights: []float64{0.6, 0.4}, Method: m, Tol: 1e-8, Warm: first.Warm})
		if cold.Status != Converged || warm.Status != Converged {
			t.Fatalf("%v: %v %v", m, cold.Message, warm.Message)
		}
		var l1 float64
		for i := range cold.Barycenter.Data {
			l1 += math.Abs(cold.Barycenter.Data[i] - warm.Barycenter.Data[i])
		}
		t.Logf("%v: cold %d iterations, warm %d, L1 %.2g", m, cold.Iterations, warm.Iterations, l1)
		if warm.Iterations >= cold.Iterations || l1 > 1e-5 {
			t.Errorf("%v: warm %d vs cold %d iterations, L1 %g", m, warm.Iterations, cold.Iterations, l1)
		}
	}
}

// The register-blocked pass (four rows, eight columns at a time, with
// column and row tails) equals the banded sum written out from its
// definition, dst[r][c] = sum_{|j - r| <= R} w(j - r) src[j][c], for sizes
// on either side of the blocks and bands narrower and wider than the grid.
// Where the CPU has AVX-512 the sixteen-column form must give the bits of
// the eight-column one (the same fused multiply-adds in the same order).
func TestBandPassDefinition(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	for _, n := range []int{1, 3, 4, 5, 8, 13, 21} {
		for _, m := range []int{1, 7, 8, 9, 16, 19, 24, 40} {
			for _, eps := range []float64{0.5, 3, 40} {
				tp, R := taps(n, 1, eps, 1e-12)
				src := make([]float64, n*m)
				for i := range src {
					src[i] = rng.Float64()
				}
				dst := make([]float64, n*m)
				bandPass(dst, src, n, m, tp, padTaps(tp), R)
				if useAVX512 {
					narrow := make([]float64, n*m)
					useAVX512 = false
					bandPass(narrow, src, n, m, tp, padTaps(tp), R)
					useAVX512 = true
					for i := range dst {
						if math.Float64bits(dst[i]) != math.Float64bits(narrow[i]) {
							t.Fatalf("n %d m %d eps %g: [%d] 512-bit %.17g, 256-bit %.17g", n, m, eps, i, dst[i], narrow[i])
						}
					}
				}
				for r := 0; r < n; r++ {
					for c := 0; c < m; c++ {
						want := 0.0
						for j := max(0, r-R); j <= min(n-1, r+R); j++ {
							want += tp[j-r+R] * src[j*m+c]
						}
						if math.Abs(dst[r*m+c]-want) > 1e-14*want {
							t.Fatalf("n %d m %d eps %g: [%d][%d] = %.17g, want %.17g", n, m, eps, r, c, dst[r*m+c], want)
						}
					}
				}
			}
		}
	}
}

// The transposed applications (one transpose each) must give Apply's
// values, which TestSeparableEqualsDense checks against the dense kernel:
// applyNT in the transposed layout, applyTN from it. Shapes include
// non-square ones, where a mixed-up side would show.
func TestApplyTransposed(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	for _, sh := range [][2]int{{5, 7}, {16, 20}, {37, 70}, {64, 33}} {
		rows, cols := sh[0], sh[1]
		for _, eps := range []float64{1, 16} {
			k := newBandKernel(rows, cols, 1, 1.5, eps, initialCutoff)
			n := rows * cols
			src, want, got, tmp, srcT, wantT := make([]float64, n), make([]float64, n), make([]float64, n), make([]float64, n), make([]float64, n), make([]float64, n)
			for i := range src {
				src[i] = math.Exp(20 * rng.Float64())
			}
			k.Apply(want, src, tmp)
			transpose(wantT, want, rows, cols)
			k.applyNT(got, src, tmp)
			for i := range got {
				if math.Abs(got[i]-wantT[i]) > 1e-14*wantT[i] {
					t.Fatalf("%dx%d eps %g: applyNT[%d] = %g, want %g", rows, cols, eps, i, got[i], wantT[i])
				}
			}
			transpose(srcT, src, rows, cols)
			k.applyTN(got, srcT, tmp)
			for i := range got {
				if math.Abs(got[i]-want[i]) > 1e-14*want[i] {
					t.Fatalf("%dx%d eps %g: applyTN[%d] = %g, want %g", rows, cols, eps, i, got[i], want[i])
				}
			}
		}
	}
}
