package sinkhorn

import (
	"math"
	"testing"

	"barygrid/grid"
)

// Over-relaxation control: on a residual history contracting by rho per
// iteration it sets omega = 2 / (1 + sqrt(1 - rho)), the optimal factor of
// successive over-relaxation for a linear iteration of rate rho (Young
// 1954), and when the residual then grows for good it backs off and
// finally falls back to plain steps and stays there; without back-off
// (unbalanced problems) at once.
func TestRelaxationControl(t *testing.T) {
	for _, c := range []struct {
		rho     float64
		backOff bool
		grow    int
	}{{0.7, false, 60}, {0.9, false, 60}, {0.97, false, 60}, {0.9, true, 300}, {0.97, true, 300}} {
		rho := c.rho
		rl := newRelaxation(0)
		rl.backOff = c.backOff
		var hist []float64
		r := 1.0
		// Until the factor is first set (a synthetic history does not
		// answer the relaxed steps, so later refinements would read it
		// wrongly).
		for i := 0; i < 40 && rl.omega == 1; i++ {
			hist = append(hist, r)
			rl.update(hist)
			r *= rho
		}
		want := math.Min(1.9, 2/(1+math.Sqrt(1-rho)))
		if math.Abs(rl.omega-want) > 1e-9 {
			t.Errorf("rho %g: omega %g, want %g", rho, rl.omega, want)
		}
		for i := 0; i < c.grow; i++ {
			r *= 1.1
			hist = append(hist, r)
			rl.update(hist)
			if c.backOff && i == 30 && !(rl.omega > 1 && rl.omega < want) {
				t.Errorf("rho %g: omega %g after the first growth, want between 1 and %g", rho, rl.omega, want)
			}
		}
		if rl.omega != 1 || !rl.stopped {
			t.Errorf("rho %g: after growth omega %g, stopped %v", rho, rl.omega, rl.stopped)
		}
	}
	if fixed := newRelaxation(1.3); fixed.auto || fixed.omega != 1.3 {
		t.Errorf("a fixed factor is %+v", fixed)
	}
}

// The hand-off: at a small epsilon auto solves the large-epsilon stages
// with scalings and the rest in the log domain, and reaches the result of a
// log-domain-only solve (the same fixed point, Benamou et al. 2015).
func TestScalingToLogHandOff(t *testing.T) {
	fs := []*grid.Field{gaussField(48, 48, 10, 12, 5), gaussField(48, 48, 36, 34, 7)}
	auto, err := Barycenter(fs, Settings{Epsilon: 1, Tol: 1e-10})
	if err != nil || auto.Status != Converged {
		t.Fatal(err, auto.Message)
	}
	seen := map[Method]bool{}
	for _, s := range auto.Stages {
		seen[s.Method] = true
	}
	if !seen[MethodScaling] || !seen[MethodLog] {
		t.Fatalf("stages %+v: want both representations", auto.Stages)
	}
	ref, err := Barycenter(fs, Settings{Epsilon: 1, Tol: 1e-10, Method: MethodLog, SingleScale: true})
	if err != nil || ref.Status != Converged {
		t.Fatal(err, ref.Message)
	}
	var l1 float64
	for i := range ref.Barycenter.Data {
		l1 += math.Abs(ref.Barycenter.Data[i] - auto.Barycenter.Data[i])
	}
	if l1 > 1e-6 {
		t.Errorf("L1 between the handed-off and the log-domain solve %g", l1)
	}
}
