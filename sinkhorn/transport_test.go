package sinkhorn

import (
	"math"
	"testing"

	"barygrid/grid"
)

// For a field and its translate by tau the entropic transport cost grows by
// exactly |tau|^2 (expand |x - y - tau|^2: the cross term vanishes because
// both marginals have the same mean), so the Sinkhorn divergence equals
// |tau|^2 up to boundary effects, which these blobs, 8 sigma from every
// edge, do not feel.
func TestDivergenceOfTranslate(t *testing.T) {
	const n = 40
	a := gaussField(n, n, 15, 17, 3)
	b := gaussField(n, n, 19, 20, 3) // tau = (4, 3) px, |tau|^2 = 25
	for _, f := range []*grid.Field{a, b} {
		f.Dx, f.Dy = 0.5, 0.5 // |tau|^2 = 25 * 0.25 in physical units
	}
	for _, eps := range []float64{0.5, 2} {
		d, _, err := Divergence(a, b, Settings{Epsilon: eps, Tol: 1e-10})
		if err != nil {
			t.Fatal(err)
		}
		if math.Abs(d-6.25) > 1e-5 {
			t.Errorf("eps %g: divergence %.8g, want |tau|^2 = 6.25", eps, d)
		}
	}
}

// S(a, a) = 0, S(a, b) = S(b, a) >= 0 (Feydy et al. 2019, theorem 1).
func TestDivergenceAxioms(t *testing.T) {
	a := gaussField(24, 28, 9, 10, 5)
	b := grid.New(24, 28)
	for r := 0; r < 24; r++ {
		for c := 0; c < 28; c++ {
			x, y := float64(c)-17, float64(r)-12
			b.Set(r, c, math.Exp(-(x*x/30 + y*y/6)))
		}
	}
	s := Settings{Epsilon: 1.5, Tol: 1e-10}
	aa, _, err := Divergence(a, a, s)
	if err != nil {
		t.Fatal(err)
	}
	ab, _, _ := Divergence(a, b, s)
	ba, _, _ := Divergence(b, a, s)
	if math.Abs(aa) > 1e-9 {
		t.Errorf("S(a, a) = %g", aa)
	}
	if !(ab > 0) || math.Abs(ab-ba) > 1e-8*ab {
		t.Errorf("S(a, b) = %g, S(b, a) = %g", ab, ba)
	}
}

// Closed-form entropic OT between Gaussians (Janati, Muzellec, Peyre,
// Cuturi, NeurIPS 2020; Mallasto et al. 2022) against the grid computation
// on sampled isotropic Gaussians: the divergence splits into one 1-D term
// per axis (see ot1d). Tolerance 1%: the grid samples the densities on
// pixels of the same order as sqrt(eps).
func TestDivergenceGaussianClosedForm(t *testing.T) {
	const n = 64
	s1, s2, eps := 9.0, 20.0, 4.0
	a := gaussField(n, n, 31.5, 31.5, s1)
	b := gaussField(n, n, 31.5, 31.5, s2)
	got, _, err := Divergence(a, b, Settings{Epsilon: eps, Tol: 1e-10})
	if err != nil {
		t.Fatal(err)
	}
	want := 2 * (ot1d(s1, s2, eps) - ot1d(s1, s1, eps)/2 - ot1d(s2, s2, eps)/2)
	if math.Abs(got-want) > 0.01*want {
		t.Errorf("grid divergence %.6g, closed form %.6g", got, want)
	}
}

// ot1d is OT_eps between centred 1-D Gaussians of variances a and b, for
// the cost |x - y|^2 and regularisation eps KL(P | P_a x P_b). The optimal
// plan is Gaussian with cross-covariance D = sqrt(a b + eps^2/16) - eps/4
// (Janati et al. 2020, theorem 1, with their sigma^2 = eps/2), so
// OT = E|X - Y|^2 + eps * KL = a + b - 2 D + eps * (-log(1 - rho^2)/2),
// rho = D / sqrt(a b) the plan's correlation.
func ot1d(a, b, eps float64) float64 {
	D := math.Sqrt(a*b+eps*eps/16) - eps/4
	rho := D / math.Sqrt(a*b)
	mi := -0.5 * math.Log(1-rho*rho)
	return a + b - 2*D + eps*mi
}

// A warm start from a transport between nearly the same fields reaches the
// same cost (the problem is strictly convex: one optimum whatever the start,
// Cuturi 2013), running only the last stage.
func TestTransportWarmStart(t *testing.T) {
	a, b := gaussField(48, 48, 20, 22, 16), gaussField(48, 48, 28, 25, 12)
	a2 := gaussField(48, 48, 20.5, 22.3, 16)
	s := Settings{Epsilon: 2, Tol: 1e-4}
	first, err := Transport(a, b, s)
	if err != nil || first.Status != Converged {
		t.Fatal(err)
	}
	cold, err := Transport(a2, b, s)
	if err != nil || cold.Status != Converged {
		t.Fatal(err)
	}
	s.Warm = first.Warm
	warm, err := Transport(a2, b, s)
	if err != nil || warm.Status != Converged {
		t.Fatal(err)
	}
	t.Logf("cold: %d iterations (%d on the full grid), warm: %d; costs %.10g and %.10g", cold.Iterations, cold.FinestIterations, warm.Iterations, cold.Cost, warm.Cost)
	if math.Abs(cold.Cost-warm.Cost) > 1e-4*math.Abs(cold.Cost) {
		t.Errorf("costs %.10g cold, %.10g warm", cold.Cost, warm.Cost)
	}
	for _, st := range warm.Stages {
		if st.Level != 0 || st.Epsilon != 2 {
			t.Errorf("warm start ran a stage at level %d, epsilon %g", st.Level, st.Epsilon)
		}
	}
}

// Inputs whose tails fall to 1e-30 and below: an over-relaxed scaling step
// can underflow a scaling to zero on such a pixel while the marginals still
// look converged, and the dual value <a, f> + <b, g> became -Inf (found by
// ranking an outlier). The scaling iteration must hand such a problem to
// the log domain: every relaxation gives a finite divergence equal to the
// log domain's (the same problem, so the same value: Benamou et al. 2015).
func TestDivergenceTinyTails(t *testing.T) {
	a := gaussField(24, 32, 26, 12, 4)
	b := gaussField(24, 32, 12.5, 12, 6)
	ref, _, err := Divergence(a, b, Settings{Epsilon: 2, Tol: 1e-9, Method: MethodLog})
	if err != nil || math.IsInf(ref, 0) || math.IsNaN(ref) {
		t.Fatalf("log domain: %v, %v", ref, err)
	}
	for _, relax := range []float64{0, 1, 1.5, 1.8, 1.95} {
		d, _, err := Divergence(a, b, Settings{Epsilon: 2, Tol: 1e-9, Relax: relax})
		if err != nil || math.Abs(d-ref) > 1e-6*math.Abs(ref) {
			t.Errorf("relax %g: divergence %v (log domain %v), %v", relax, d, ref, err)
		}
	}
}
