package sinkhorn

import (
	"errors"
	"math"
	"testing"

	"barygrid/grid"
)

// With equal input masses the unbalanced barycenter tends to the balanced
// one as the penalty grows (lambda = rho / (rho + eps) -> 1; Chizat et al.
// 2018): its shape (L1 after normalising) and its mass relative to the
// inputs' approach those of the balanced barycenter as rho rises through
// 10, 100 and 1000 eps. (The plain scaling iteration's mass mode converges
// at a rate near lambda, so far larger rho needs far more iterations.)
func TestUnbalancedTendsToBalanced(t *testing.T) {
	f1, _ := grid.Normalize(gaussField(20, 24, 7, 8, 4))
	f2, _ := grid.Normalize(gaussField(20, 24, 15, 11, 6))
	fs := []*grid.Field{f1, f2}
	bal, err := Barycenter(fs, Settings{Epsilon: 2, Tol: 1e-10})
	if err != nil {
		t.Fatal(err)
	}
	prevL1, prevMass := math.Inf(1), math.Inf(1)
	for _, rho := range []float64{20, 200, 2000} {
		unb, err := Barycenter(fs, Settings{Epsilon: 2, Unbalanced: rho, Tol: 1e-6, MaxIter: 100000})
		if err != nil || unb.Status != Converged {
			t.Fatal(err, unb.Message)
		}
		norm, _ := grid.Normalize(unb.Barycenter)
		var l1 float64
		for i := range norm.Data {
			l1 += math.Abs(norm.Data[i] - bal.Barycenter.Data[i])
		}
		dm := math.Abs(unb.Mass/unb.InputMasses[0] - 1)
		t.Logf("rho %g: L1 %.4g, relative mass %.4g", rho, l1, unb.Mass/unb.InputMasses[0])
		if l1 >= prevL1 || dm >= prevMass {
			t.Errorf("rho %g: L1 %g and mass deviation %g do not shrink (before: %g, %g)", rho, l1, dm, prevL1, prevMass)
		}
		prevL1, prevMass = l1, dm
	}
	if prevL1 > 0.05 || prevMass > 0.02 {
		t.Errorf("at rho = 1000 eps: L1 %g, mass deviation %g; want below 0.05 and 0.02", prevL1, prevMass)
	}
}

// Inputs that are one field a scaled by constants m_k. Derivation from the
// fixed-point equations of the KL-penalised barycenter (Chizat, Peyre,
// Schmitzer, Vialard 2018, sec. 5; lambda = rho/(rho+eps)):
//
//	u_k = (a_k / K v_k)^lambda,  b = (sum_k w_k (K u_k)^(1-lambda))^(1/(1-lambda)),
//	v_k = (b / K u_k)^lambda.
//
// If (u, v, b) solves them for a_k = a, then u_k = alpha_k u, v_k = gamma_k v,
// b' = B b solves them for a_k = m_k a when alpha_k = (m_k/gamma_k)^lambda,
// gamma_k = (B/alpha_k)^lambda and B^(1-lambda) = sum_k w_k alpha_k^(1-lambda).
// Eliminating: alpha_k = m_k^(lambda/(1-lambda^2)) B^(-lambda^2/(1-lambda^2)),
// and B = (sum_k w_k m_k^(lambda/(1+lambda)))^(1+lambda): the barycenter's
// mass is B times the mass for unscaled inputs.
func TestUnbalancedMassOfScaledInputs(t *testing.T) {
	base := gaussField(24, 24, 11.5, 11.5, 9)
	m := []float64{1, 2.5, 0.4}
	w := []float64{0.2, 0.5, 0.3}
	for _, rho := range []float64{1, 10} {
		eps := 2.0
		ref, err := Barycenter([]*grid.Field{base, base, base}, Settings{Epsilon: eps, Unbalanced: rho, Weights: w, Tol: 1e-11})
		if err != nil || ref.Status != Converged {
			t.Fatal(err, ref.Message)
		}
		in := []*grid.Field{grid.Scale(base, m[0]), grid.Scale(base, m[1]), grid.Scale(base, m[2])}
		got, err := Barycenter(in, Settings{Epsilon: eps, Unbalanced: rho, Weights: w, Tol: 1e-11})
		if err != nil || got.Status != Converged {
			t.Fatal(err, got.Message)
		}
		lam := rho / (rho + eps)
		var s float64
		for k := range m {
			s += w[k] * math.Pow(m[k], lam/(1+lam))
		}
		B := math.Pow(s, 1+lam)
		if ratio := got.Mass / ref.Mass; math.Abs(ratio-B) > 1e-6*B {
			t.Errorf("rho %g: mass ratio %.10g, formulation gives %.10g", rho, ratio, B)
		}
		if math.Abs(got.Barycenter.Mass()-got.Mass) > 1e-9*got.Mass {
			t.Errorf("returned field has mass %g, result says %g", got.Barycenter.Mass(), got.Mass)
		}
	}
}

func TestLogDomainUnbalancedAgrees(t *testing.T) {
	fs := []*grid.Field{gaussField(16, 18, 5, 6, 3), grid.Scale(gaussField(16, 18, 11, 9, 4), 3)}
	a, err := Barycenter(fs, Settings{Epsilon: 2, Unbalanced: 5, Method: MethodScaling, Tol: 1e-10})
	if err != nil || a.Status != Converged {
		t.Fatal(err, a.Message)
	}
	b, err := Barycenter(fs, Settings{Epsilon: 2, Unbalanced: 5, Method: MethodLog, Tol: 1e-10})
	if err != nil || b.Status != Converged {
		t.Fatal(err, b.Message)
	}
	if math.Abs(a.Mass-b.Mass) > 1e-7*a.Mass {
		t.Errorf("masses %g and %g", a.Mass, b.Mass)
	}
}

func TestMask(t *testing.T) {
	fs := []*grid.Field{gaussField(20, 20, 6, 6, 3), gaussField(20, 20, 13, 12, 3)}
	ones := grid.New(20, 20)
	for i := range ones.Data {
		ones.Data[i] = 1
	}
	plain, _ := Barycenter(fs, Settings{Epsilon: 2})
	all, err := Barycenter(fs, Settings{Epsilon: 2, Mask: ones})
	if err != nil {
		t.Fatal(err)
	}
	for i := range plain.Barycenter.Data {
		if plain.Barycenter.Data[i] != all.Barycenter.Data[i] {
			t.Fatalf("all-ones mask changed pixel %d", i)
		}
	}
	// Mask out a band of columns 8..11: inputs have (tiny) mass there.
	mask := grid.New(20, 20)
	for i := range mask.Data {
		if c := i % 20; c < 8 || c > 11 {
			mask.Data[i] = 1
		}
	}
	if _, err := Barycenter(fs, Settings{Epsilon: 2, Mask: mask}); err == nil {
		t.Fatal("mass outside the mask accepted without DropOutside")
	}
	r, err := Barycenter(fs, Settings{Epsilon: 2, Mask: mask, DropOutside: true})
	if err != nil {
		t.Fatal(err)
	}
	for i, v := range r.Barycenter.Data {
		if mask.Data[i] == 0 && v != 0 {
			t.Fatalf("masked pixel %d holds %g", i, v)
		}
	}
	if !(r.Dropped[0] > 0) || !(r.Dropped[1] > 0) {
		t.Errorf("dropped mass not reported: %v", r.Dropped)
	}
	if math.Abs(r.Barycenter.Mass()-1) > 1e-9 {
		t.Errorf("mass %g", r.Barycenter.Mass())
	}
	if _, err := Barycenter(fs, Settings{Epsilon: 2, Mask: grid.New(10, 40)}); !errors.Is(err, ErrMask) {
		t.Errorf("mask of another shape with as many pixels: got %v, want ErrMask", err)
	}
	if _, err := Barycenter(fs, Settings{Epsilon: 2, Mask: grid.New(20, 20)}); !errors.Is(err, ErrMask) {
		t.Errorf("all-zero mask: got %v, want ErrMask", err)
	}
}

// The unbalanced Sinkhorn divergence (Sejourne et al. 2019): zero for equal
// fields, symmetric, positive for a scaled copy and growing with the mass
// difference, and close to the balanced divergence for equal masses and a
// large penalty.
func TestUnbalancedDivergence(t *testing.T) {
	a, _ := grid.Normalize(gaussField(24, 24, 9, 10, 4))
	b, _ := grid.Normalize(gaussField(24, 24, 13, 12, 4))
	s := Settings{Epsilon: 1, Tol: 1e-9, MaxIter: 20000}
	aa, _, err := UnbalancedDivergence(a, a, 5, s)
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(aa) > 1e-9 {
		t.Errorf("S(a, a) = %g", aa)
	}
	ab, _, _ := UnbalancedDivergence(a, b, 5, s)
	ba, _, _ := UnbalancedDivergence(b, a, 5, s)
	if !(ab > 0) || math.Abs(ab-ba) > 1e-6*ab {
		t.Errorf("S(a, b) = %g, S(b, a) = %g", ab, ba)
	}
	s2, _, _ := UnbalancedDivergence(a, grid.Scale(a, 2), 5, s)
	s3, _, _ := UnbalancedDivergence(a, grid.Scale(a, 3), 5, s)
	if !(s2 > 0 && s3 > s2) {
		t.Errorf("scaled copies: S(a, 2a) = %g, S(a, 3a) = %g", s2, s3)
	}
	bal, _, _ := Divergence(a, b, s)
	big, _, err := UnbalancedDivergence(a, b, 500, Settings{Epsilon: 1, Tol: 1e-7, MaxIter: 20000})
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("balanced %.6g, rho 5: %.6g, rho 500: %.6g; scaled x2 %.4g, x3 %.4g", bal, ab, big, s2, s3)
	if math.Abs(big-bal) > 0.05*bal {
		t.Errorf("rho 500: %g, balanced %g", big, bal)
	}
}
