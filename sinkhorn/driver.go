package sinkhorn

import (
	"cmp"
	"fmt"
	"math"
	"slices"
	"time"

	"barygrid/grid"
)

// The driver owns the loop that every problem (barycenter plain, debiased,
// unbalanced or masked; transport) and every representation (scalings, log
// domain) share: the pyramid of levels, the epsilon stages, the stopping
// rule, the residual history, progress, over-relaxation, health checks and
// the final status. A representation only knows how to take one step.

// iteration is one representation of the Sinkhorn state on one level at one
// epsilon.
type iteration interface {
	// step runs one round of updates and returns the first-marginal violation.
	step(omega float64) float64
	// debiasResidual is |d K d - b|_1 before the last d update (0 when
	// plain); with a smoothed d, the change of log d in the last update.
	debiasResidual() float64
	// debiasEquation is |d K d - b|_1 before the last d update.
	debiasEquation() float64
	// health returns "" while the representation is exact; strict asks for
	// the safe range, not only for finite values.
	health(strict bool) string
	// verify checks the residual with the untruncated kernel where the
	// representation truncates it; widened reports that the kernel changed
	// and the iteration must go on before anything is concluded.
	verify(r, tol float64) (resid float64, widened bool)
	// state returns the potentials to start the next stage from.
	state() *potentials
	// logB is log b, the current second marginal.
	logB() []float64
	// duals returns log u, log v, log K v, log K u of the single pair of a
	// transport problem.
	duals() (F, G, LKv, LKu []float64)
	method() Method
	band() int
}

// potentials carry a solve from one stage to the next: epsilon times the
// log-scalings of the second marginals (g_k) and of the debiasing field (d),
// in the cost's units, on a given level.
type potentials struct {
	level int
	g     [][]float64
	d     []float64
}

// level is one grid of the pyramid; level 0 is the full grid.
type level struct {
	rows, cols, n int
	dx, dy        float64
	a, la         [][]float64
	target, lt    []float64 // fixed second marginal and its log (transport)
	mask          []bool
	mass          []float64 // of each input, for the relative violation
}

// stagePlan is one epsilon stage: its level and epsilon.
type stagePlan struct {
	level int
	eps   float64
}

const (
	// checkEvery is how often a truncated kernel is checked.
	checkEvery = 100
	// stageTol and stageCap bound the stages before the last: they only
	// need a starting point for the next.
	stageTol = 1e-3
	stageCap = 300
	// minSide: the pyramid stops before a side would fall below it.
	minSide = 8
)

func (p *problem) fullLevel() *level {
	lv := &level{rows: p.rows, cols: p.cols, n: p.n, dx: p.dx, dy: p.dy, a: p.a, target: p.target, mask: p.mask}
	lv.fillLogs()
	return lv
}

func (lv *level) fillLogs() {
	lv.la = make([][]float64, len(lv.a))
	lv.mass = make([]float64, len(lv.a))
	for k, a := range lv.a {
		lv.la[k] = logOf(a)
		lv.mass[k] = grid.Sum(a)
	}
	if lv.target != nil {
		lv.lt = logOf(lv.target)
	}
}

// pyramid returns the levels, finest first: 2 x 2 block sums, the pixel
// size doubling per level (Schmitzer, SIAM J. Sci. Comput. 41(3), 2019).
// An odd last row or column forms blocks of its own; a coarse pixel is
// allowed by the mask when any of its fine pixels is.
func (p *problem) pyramid(maxLevels int) []*level {
	lvs := []*level{p.fullLevel()}
	for len(lvs) < maxLevels {
		f := lvs[len(lvs)-1]
		rc, cc := (f.rows+1)/2, (f.cols+1)/2
		if min(rc, cc) < minSide {
			break
		}
		c := &level{rows: rc, cols: cc, n: rc * cc, dx: 2 * f.dx, dy: 2 * f.dy}
		sum := func(x []float64) []float64 {
			out := make([]float64, c.n)
			for r := 0; r < f.rows; r++ {
				for q := 0; q < f.cols; q++ {
					out[(r/2)*cc+q/2] += x[r*f.cols+q]
				}
			}
			return out
		}
		for _, a := range f.a {
			c.a = append(c.a, sum(a))
		}
		if f.target != nil {
			c.target = sum(f.target)
		}
		if f.mask != nil {
			c.mask = make([]bool, c.n)
			for r := 0; r < f.rows; r++ {
				for q := 0; q < f.cols; q++ {
					c.mask[(r/2)*cc+q/2] = c.mask[(r/2)*cc+q/2] || f.mask[r*f.cols+q]
				}
			}
		}
		c.fillLogs()
		lvs = append(lvs, c)
	}
	return lvs
}

// schedule returns the epsilon stages: epsilon doubles from the target up
// to about a tenth of the squared extent of the grid (where transport is
// easy), and the stages run from there down (Kosowsky & Yuille 1994;
// Schmitzer 2019). Each stage runs on the coarsest level whose squared pixel
// is at most levelRatio * epsilon, a level that still resolves the blur of
// its epsilon; the last stage runs on level 0 at the target.
func (p *problem) schedule(levels []*level) []stagePlan {
	ext := math.Max(float64(p.cols)*p.dx, float64(p.rows)*p.dy)
	plan := []stagePlan{{0, p.eps}}
	for eps := 2 * p.eps; eps/2 < ext*ext/10; eps *= 2 {
		l := 0
		for l+1 < len(levels) {
			h := math.Max(levels[l+1].dx, levels[l+1].dy)
			if h*h > levelRatio*eps {
				break
			}
			l++
		}
		plan = append(plan, stagePlan{l, eps})
	}
	// At the target epsilon, also visit every level finer than the last
	// coarse stage's that resolves it, so that the full grid starts from a
	// neighbour one level coarser rather than from an 8 x coarser grid
	// (measured at 256^2, epsilon 16: the jump from 32^2 cost 217 full-grid
	// iterations).
	if len(plan) > 1 {
		for l := plan[1].level - 1; l > 0; l-- {
			h := math.Max(levels[l].dx, levels[l].dy)
			if h*h <= levelRatio*p.eps {
				plan = append(plan, stagePlan{l, p.eps})
			}
		}
	}
	// Built from the target outward; the solve runs it coarse first. The
	// target stage on the full grid (plan[0]) must come last.
	head := plan[0]
	plan = plan[1:]
	slices.SortStableFunc(plan, func(a, b stagePlan) int {
		if a.eps != b.eps {
			return cmp.Compare(b.eps, a.eps)
		}
		return cmp.Compare(b.level, a.level)
	})
	return append(plan, head)
}

// levelRatio: a level of pixel h runs the stages with epsilon >= h^2 /
// levelRatio. With 2, the full grid runs only the target stage when the
// target is at least half a squared pixel of the next level.
const levelRatio = 2

// run is the state one solve shares across its stages.
type run struct {
	p      *problem
	res    *Result
	travel float64 // squared distance mass must travel (see travel)
}

// solve runs the stages and returns the result on the full grid, with the
// last stage's state (a transport reads its dual potentials from it).
func (p *problem) solve() (*Result, iteration) {
	maxLevels := 16
	if p.singleScale || p.rho > 0 {
		// Unbalanced problems scale their inputs by the kernel mass of the
		// full grid (see setup), which differs on coarser grids.
		maxLevels = 1
	}
	levels := p.pyramid(maxLevels)
	plan := p.schedule(levels)
	var pot *potentials
	if p.warm.fits(p) {
		// A warm start is already at the target epsilon on the full grid.
		plan = []stagePlan{{0, p.eps}}
		pot = &potentials{g: p.warm.g, d: p.warm.d}
	}
	res := &Result{Epsilon: p.eps, Method: MethodLog}
	rn := &run{p: p, res: res}
	if p.method == MethodAuto {
		a := p.a
		if p.target != nil {
			a = [][]float64{p.a[0], p.target}
		}
		rn.travel = travel(a, p.rows, p.cols, p.dx, p.dy)
	}
	used := map[int]bool{}
	var it iteration
	for si, sp := range plan {
		lv := levels[sp.level]
		if p.rho > 0 && !p.product && sp.eps != p.eps {
			lv = p.unbalancedStage(lv, sp.eps)
		}
		used[sp.level] = true
		if pot != nil && pot.level != sp.level {
			pot = upsample(pot, levels, sp.level)
		}
		final := si == len(plan)-1
		// The last stage always gets an iteration, so that a result on the
		// full grid exists whatever the cap; earlier stages get what is left
		// beyond that one and are skipped when nothing is.
		tol, budget := p.tol, max(p.maxIter-res.Iterations, 1)
		if !final {
			tol, budget = math.Max(p.tol, stageTol), min(p.maxIter-res.Iterations-1, stageCap)
			if budget <= 0 {
				continue
			}
		}
		var status Status
		it = nil // the previous stage's buffers may go before the next allocates
		it, status = rn.stage(lv, sp, pot, tol, budget, final)
		if status == NumericalFailure {
			break
		}
		pot = it.state()
		pot.level = sp.level
		if final {
			res.Status = status
			if status == IterationLimit {
				res.Message = fmt.Sprintf("stopped after %d iterations at residual %.3g (tolerance %.3g)", res.Iterations, res.Residual, p.tol)
				if n := len(res.Stages); n > 0 && res.Stages[n-1].Iterations < res.Iterations/len(plan) {
					res.Message += fmt.Sprintf("; the cap left %d iterations for the full grid at the target epsilon", res.Stages[n-1].Iterations)
				}
				if p.debias {
					res.Message += fmt.Sprintf(", debiasing residual %.3g", res.DebiasResidual)
				}
			}
		}
	}
	res.Levels = len(used)
	if it != nil && res.Status != NumericalFailure {
		lb := it.logB()
		res.Barycenter = p.output(lb)
		if p.debias {
			res.DebiasEquation = it.debiasEquation()
		}
		res.KernelHalfWidth = it.band()
		res.Warm = &WarmStart{rows: p.rows, cols: p.cols, eps: p.eps, g: pot.g, d: pot.d}
	}
	if res.Status == NotTerminated {
		// Every path above sets a status; this guards the promise.
		res.Status = NumericalFailure
		res.Message = "solver stopped without a status"
	}
	return res, it
}

// stage solves one stage, choosing the representation: the scaling one
// where it is predicted exact (or forced), else the log domain; a scaling
// stage that fails is run again in the log domain from the same start
// (MethodAuto) or reported (MethodScaling).
func (rn *run) stage(lv *level, sp stagePlan, pot *potentials, tol float64, budget int, final bool) (iteration, Status) {
	p, res := rn.p, rn.res
	useScaling := p.method == MethodScaling || (p.method == MethodAuto && rn.travel/sp.eps <= 460)
	relax := p.relax
	for {
		var it iteration
		if useScaling {
			if s := newScalingIter(p, lv, sp.eps, pot); s != nil {
				it = s
			} else if p.method == MethodScaling {
				res.Status, res.Message = NumericalFailure, fmt.Sprintf("epsilon %g too small for the scaling iteration: the potentials leave its range", sp.eps)
				return nil, NumericalFailure
			}
		}
		if it == nil {
			it = newLogIter(p, lv, sp.eps, pot)
		}
		st, omega, msg := rn.iterate(it, lv, sp, tol, budget, final, relax)
		if st != NumericalFailure {
			res.Method, res.Relax = it.method(), omega
			return it, st
		}
		switch {
		case it.method() == MethodScaling && p.method == MethodAuto:
			// The log domain has no range to leave, so it keeps the
			// relaxation: without it the stage would take the plain
			// iteration's count (measured: a relaxed scaling stage that
			// failed on 8 x 48^2 at epsilon 1 took 1867 plain iterations).
			useScaling = false
			res.FellBackToLog = true
		case omega != 1:
			// Over-relaxation can push the iterates out of range on the
			// way (scalings over- or underflow, potentials reach Inf - Inf):
			// run the stage again without it.
			relax = 1
		default:
			res.Status, res.Message = NumericalFailure, msg
			return it, NumericalFailure
		}
		budget = min(budget, p.maxIter-res.Iterations)
		if budget <= 0 {
			res.Status, res.Message = NumericalFailure, msg
			return it, NumericalFailure
		}
	}
}

// iterate is the loop of one stage. It returns the stage's status, the
// final relaxation factor and, on failure, the reason.
func (rn *run) iterate(it iteration, lv *level, sp stagePlan, tol float64, budget int, final bool, relax float64) (Status, float64, string) {
	p, res := rn.p, rn.res
	start := time.Now()
	rl := newRelaxation(relax)
	rl.backOff = p.rho == 0
	stage := Stage{Level: sp.level, Rows: lv.rows, Cols: lv.cols, Epsilon: sp.eps, Method: it.method()}
	var hist []float64
	status := NotTerminated
	msg := ""
	mark := len(res.Residuals)
	nw := rn.newtonFor(it, lv, final && sp.level == 0 && sp.eps == p.eps)
	last := math.Inf(1)
	for n := 0; ; n++ {
		if n >= budget {
			status = IterationLimit
			break
		}
		var r float64
		peek, used := false, 1
		if nw != nil && nw.ready(last, budget-n) {
			// A Newton step: its kernel work counts as iterations, each
			// recording the residual of the iterate in force.
			r0 := last
			var ok bool
			r, used, ok = nw.step()
			if !ok {
				nw.pause = pauseAfterFail
			}
			stage.NewtonSteps = nw.tried
			if nw.stalled(r, used) {
				// Back to the sweeps, with a relaxation that starts afresh:
				// the history before the phase describes another state.
				nw = nil
				rl = newRelaxation(relax)
				rl.backOff = p.rho == 0
				hist = hist[:0]
			}
			for i := range used {
				x := r0
				if i == used-1 {
					x = r
				}
				res.Residuals = append(res.Residuals, x)
			}
			res.Iterations += used
			res.FinestIterations += used
			stage.Iterations += used
			n += used - 1
		} else {
			var om float64
			om, peek = rl.next(len(hist), tol)
			r = it.step(om)
			res.Iterations++
			if sp.level == 0 {
				res.FinestIterations++
			}
			stage.Iterations++
			res.Residuals = append(res.Residuals, r)
			if !peek {
				hist = append(hist, r)
			}
			if nw != nil {
				nw.reset()
			}
		}
		last = r
		res.Residual, res.DebiasResidual = r, it.debiasResidual()
		stage.Residual, stage.DebiasResidual = r, it.debiasResidual()
		if p.progress != nil {
			p.progress(res.Iterations, r)
		}
		// Strictness follows the stage's factor, not a peek's: a relaxed
		// stage that fails retries without relaxation first.
		if m := it.health(rl.omega == 1); m != "" || math.IsNaN(r) || math.IsInf(r, 0) {
			if m == "" {
				m = fmt.Sprintf("residual became %v at epsilon %g", r, sp.eps)
			}
			status, msg = NumericalFailure, m
			break
		}
		// Every checkEvery iterations, or after a Newton step that passed
		// a multiple of it.
		if r <= tol || (n+1)/checkEvery > (n+1-used)/checkEvery {
			r2, widened := it.verify(r, tol)
			if widened {
				if nw != nil {
					nw.reset()
				}
				continue
			}
			r = r2
			res.Residual, stage.Residual = r, r
		}
		if r <= tol && (!final || !p.debias || it.debiasResidual() <= tol) {
			status = Converged
			break
		}
		switch {
		case used > 1:
			// A Newton step; the relaxation's history ended with the sweeps.
		case nw != nil && nw.steps > 0:
			// The relaxation's history ended with the sweeps.
		case peek:
			rl.peeked(len(hist), r)
		default:
			rl.update(hist)
		}
	}
	if status == NumericalFailure {
		// The history keeps finite values only (reports are JSON); the failed
		// attempt's iterations still count.
		res.Residuals = res.Residuals[:mark]
		stage.Residual, res.Residual = math.MaxFloat64, math.MaxFloat64
		if len(hist) > 1 && !math.IsNaN(hist[len(hist)-2]) {
			stage.Residual, res.Residual = hist[len(hist)-2], hist[len(hist)-2]
		}
	}
	stage.Elapsed = time.Since(start)
	res.Stages = append(res.Stages, stage)
	return status, rl.omega, msg
}

// upsample carries potentials to a finer level (Schmitzer 2019; Feydy
// 2020): fine pixel r lies at coarse coordinate (r - 0.5) / 2. The
// interpolation is separable cubic (Catmull-Rom), which reproduces
// quadratics: potentials of the squared cost are nearly quadratic, and
// bilinear interpolation would leave an error of about (coarse pixel)^2 / 4,
// as large as epsilon itself at the hand-over. Where a neighbour is -Inf
// (zero mass, outside a mask) only the finite corners of the bilinear cell
// count.
func upsample(pot *potentials, levels []*level, to int) *potentials {
	for pot.level > to {
		c, f := levels[pot.level], levels[pot.level-1]
		up := func(x []float64) []float64 {
			if x == nil {
				return nil
			}
			if finite(x) {
				return upsampleSeparable(x, c, f)
			}
			out := make([]float64, f.n)
			for r := 0; r < f.rows; r++ {
				y := math.Min(math.Max((float64(r)-0.5)/2, 0), float64(c.rows-1))
				for q := 0; q < f.cols; q++ {
					xx := math.Min(math.Max((float64(q)-0.5)/2, 0), float64(c.cols-1))
					out[r*f.cols+q] = interp(x, c.rows, c.cols, y, xx)
				}
			}
			return out
		}
		next := &potentials{level: pot.level - 1, d: up(pot.d)}
		for _, g := range pot.g {
			next.g = append(next.g, up(g))
		}
		pot = next
	}
	return pot
}

func finite(x []float64) bool {
	for _, v := range x {
		if math.IsInf(v, 0) || math.IsNaN(v) {
			return false
		}
	}
	return true
}

// upsampleSeparable is upsample's cubic interpolation of a finite coarse
// array as two 1-D passes, along x then along y (the same weights as
// interp's, 8 taps per pixel instead of 16 with their checks: it had been
// 5% of a solve at epsilon 16).
func upsampleSeparable(x []float64, c, f *level) []float64 {
	type tap struct {
		at [4]int
		w  [4]float64
	}
	taps := func(fine, coarse int) []tap {
		ts := make([]tap, fine)
		for i := range ts {
			y := math.Min(math.Max((float64(i)-0.5)/2, 0), float64(coarse-1))
			i0 := int(y)
			ts[i].w = catmullRom(y - float64(i0))
			for j := range 4 {
				ts[i].at[j] = min(max(i0-1+j, 0), coarse-1)
			}
		}
		return ts
	}
	tx, ty := taps(f.cols, c.cols), taps(f.rows, c.rows)
	tmp := make([]float64, c.rows*f.cols)
	for r := range c.rows {
		row, out := x[r*c.cols:(r+1)*c.cols], tmp[r*f.cols:(r+1)*f.cols]
		for q, t := range tx {
			out[q] = t.w[0]*row[t.at[0]] + t.w[1]*row[t.at[1]] + t.w[2]*row[t.at[2]] + t.w[3]*row[t.at[3]]
		}
	}
	out := make([]float64, f.n)
	for r, t := range ty {
		o := out[r*f.cols : (r+1)*f.cols]
		for j := range 4 {
			src, w := tmp[t.at[j]*f.cols:(t.at[j]+1)*f.cols], t.w[j]
			for q := range o {
				o[q] += w * src[q]
			}
		}
	}
	return out
}

// interp evaluates the rows x cols array x at (y, xx), in pixel units.
func interp(x []float64, rows, cols int, y, xx float64) float64 {
	r0, q0 := int(y), int(xx)
	ty, tx := y-float64(r0), xx-float64(q0)
	at := func(r, q int) float64 {
		r = min(max(r, 0), rows-1)
		q = min(max(q, 0), cols-1)
		return x[r*cols+q]
	}
	wy, wx := catmullRom(ty), catmullRom(tx)
	var s float64
	ok := true
	for i := 0; i < 4 && ok; i++ {
		for j := 0; j < 4; j++ {
			v := at(r0-1+i, q0-1+j)
			if math.IsInf(v, 0) || math.IsNaN(v) {
				ok = false
				break
			}
			s += wy[i] * wx[j] * v
		}
	}
	if ok {
		return s
	}
	var ws float64
	s = 0
	for _, nb := range [4][3]float64{{0, 0, (1 - ty) * (1 - tx)}, {0, 1, (1 - ty) * tx}, {1, 0, ty * (1 - tx)}, {1, 1, ty * tx}} {
		v := at(r0+int(nb[0]), q0+int(nb[1]))
		if nb[2] == 0 || math.IsInf(v, 0) || math.IsNaN(v) {
			continue
		}
		s += nb[2] * v
		ws += nb[2]
	}
	if ws > 0 {
		return s / ws
	}
	return math.Inf(-1)
}

// catmullRom returns the weights of the four samples around t in [0, 1).
func catmullRom(t float64) [4]float64 {
	t2, t3 := t*t, t*t*t
	return [4]float64{
		(-t3 + 2*t2 - t) / 2,
		(3*t3 - 5*t2 + 2) / 2,
		(-3*t3 + 4*t2 + t) / 2,
		(t3 - t2) / 2,
	}
}

// relaxation tracks the over-relaxation factor. In auto mode it starts at 1,
// estimates the contraction rate rho of the plain iteration from the residual
// history, and moves to omega = 2 / (1 + sqrt(1 - rho)), the optimum for a
// linear fixed-point iteration of rate rho (Young's SOR theory, as applied to
// Sinkhorn by Lehmann, von Renesse, Sambale, Uschmajew 2021). If the residual
// then grows, it backs off (see update).
//
// Balanced problems read the residual of a relaxed step as inflated: each
// update overshoots its projection by omega - 1, and the marginal violation
// measured after it is about 1 / (2 - omega) times the one a plain step from
// the same state shows (measured on 8 x 512^2 at epsilon 1: 8.4e-4 relaxed
// at omega 1.98, 1.5e-5 one plain step later). Their growth tests therefore
// compare r (2 - omega), and they take a single plain step (a peek) when
// that estimate says the tolerance may be met, instead of waiting for the
// inflated residual itself to get there. A peek is a true iteration: its
// state is the one reported if it converges. It disturbs the relaxed
// iteration for about 1 / (2 - omega) steps, so peeks are spaced by twice
// that.
type relaxation struct {
	omega   float64
	auto    bool
	since   int // iteration at which omega was set
	stopped bool
	best    float64
	backOff bool // back off on growth instead of stopping (balanced only)
	// Peeks (balanced, auto): last is the latest relaxed residual, scale
	// calibrates r (2 - omega) against the last peek, lastPeek is when it was.
	last, scale float64
	lastPeek    int
}

func newRelaxation(fixed float64) *relaxation {
	if fixed != 0 {
		return &relaxation{omega: fixed}
	}
	return &relaxation{omega: 1, auto: true, best: math.Inf(1), scale: 1, lastPeek: -1 << 30}
}

// omegaCap bounds the refined factor. At 512^2 and epsilon 1 the plain
// rate is 1 - 2e-5 and Young's optimum 1.990; capped at 1.98 the slow mode
// contracts by 0.9975 per step (measured), at the optimum by 0.991.
const omegaCap = 1.995

// settleGrowth is the growth of the residual over the best one that backs
// the factor off even while it settles.
const settleGrowth = 1000

// norm is the residual a plain step would show, estimated from a relaxed one.
func (r *relaxation) norm(cur float64) float64 {
	if !r.backOff || r.omega <= 1 {
		return cur
	}
	return cur * (2 - r.omega)
}

// next returns the factor of the next step and whether that step is a peek
// (see peekDue); n counts the relaxed steps so far.
func (r *relaxation) next(n int, tol float64) (float64, bool) {
	if r.peekDue(n, tol) {
		// Recorded here, not in peeked: a step whose band check widens the
		// kernel is not reported back, and must not peek again at once.
		r.lastPeek = n
		return 1, true
	}
	return r.omega, false
}

// peekDue reports whether the next step should be a plain one: a balanced
// auto run, well relaxed, whose estimate of the plain residual meets tol.
// n counts the relaxed steps so far.
func (r *relaxation) peekDue(n int, tol float64) bool {
	if !r.auto || r.stopped || !r.backOff || r.omega < 1.5 || r.last == 0 {
		return false
	}
	return float64(n-r.lastPeek) >= 2/(2-r.omega) && r.scale*r.norm(r.last) <= tol
}

// peeked takes the residual of a plain step: it calibrates the estimate and
// restarts the growth tests, since the relaxed residual climbs back to its
// inflated level over the next 1 / (2 - omega) steps.
func (r *relaxation) peeked(n int, cur float64) {
	if e := r.norm(r.last); e > 0 {
		r.scale = math.Min(math.Max(cur/e, 0.3), 3)
	}
	r.since, r.best = n, cur
}

func (r *relaxation) update(hist []float64) {
	n := len(hist)
	if !r.auto || r.stopped || n == 0 {
		return
	}
	cur := hist[n-1]
	r.last = cur
	if r.omega != 1 {
		// Allow transient growth, but not a sustained one.
		//
		// In balanced runs r (2 - omega) estimates the plain residual only
		// once the overshoot has built up, about 1 / (2 - omega) steps
		// after omega changed: before that it reads too low (measured at
		// 512^2: 3e-7 one step after omega rose to 1.988, 3e-6 25 steps
		// later), and taken as the best it made the growth test back off
		// on a run that was converging. So while it settles they neither
		// test nor record it, nor read a rate for the refinement below,
		// and their window for sustained growth is twice as long.
		sustain, settle := 50, 0
		if r.backOff {
			settle = int(1 / (2 - r.omega))
			sustain = max(sustain, 2*settle)
		}
		// While it settles, only a runaway counts: the overshoot after a
		// raise stays within 10x (measured at 512^2, above), while an
		// unstable factor grows without bound (a smoothed debiased solve
		// at 96^2 went from 5.7e-6 to 1e+53 inside one settling window
		// and took 1966 full-grid iterations). Both sides are estimates
		// of the plain residual, as in the growth tests below, which a
		// runaway passes.
		if n-r.since < settle && r.norm(cur) <= settleGrowth*r.best {
			return
		}
		if r.norm(cur) > 10*r.best || (n-r.since > sustain && r.norm(cur) > r.best) {
			// Back off by half the excess, and give up below 1.05. Close
			// to the optimum the residual oscillates before it falls, and
			// a refined omega may overshoot it: dropping to 1 for good
			// there cost 4x (measured: cap 1.97 without back-off, 1612
			// finest iterations at epsilon 1, 128^2; with it, 323 against
			// 422 at the old cap of 1.95). Unbalanced problems stop at once:
			// their mass mode extrapolates at a rate set by omega (massMode)
			// and a changing omega stalled it.
			r.best = r.norm(cur) // at the omega it was measured with
			r.omega = 1 + (r.omega-1)/2
			r.since = n
			if r.omega < 1.05 || !r.backOff {
				r.omega, r.stopped = 1, true
			}
			return
		}
		r.best = math.Min(r.best, r.norm(cur))
		// Below the optimum the relaxed rate lambda exceeds omega - 1, and
		// Young's relation (lambda + omega - 1)^2 = lambda omega^2 mu^2 gives
		// the plain iteration's mu^2 back: refine omega from it. The rate
		// is read over spans of 3 steps (10 before): omega climbs to its
		// value sooner (8 x N^2 make_fields, finest-level iterations at
		// epsilon 1: 317 -> 256 at 128^2, 527 -> 427 at 256^2; at epsilon
		// 16: 96 -> 79 and 171 -> 135); with 2 the gain was within noise.
		// Unbalanced runs keep 10, with which their mass mode was tuned.
		span := 3
		if !r.backOff {
			span = 10
		}
		if n-r.since >= settle+2*span && (n-r.since-settle)%span == 0 {
			lam := math.Pow(hist[n-1]/hist[n-1-span], 1/float64(span))
			// Young's relation holds for a real, steady rate. Above a
			// mode's optimum the residual oscillates instead (period about
			// 60 steps at 128^2), and a rate read over part of a swing
			// pushed omega further up (measured: 1.992 at 128^2, where
			// 1.97 converged). Balanced runs refine only when two
			// consecutive spans agree to a quarter of 1 - lambda.
			steady := true
			if r.backOff {
				prev := math.Pow(hist[n-1-span]/hist[n-1-2*span], 1/float64(span))
				steady = math.Abs(prev-lam) <= 0.25*(1-lam)
			}
			// At the optimum and above it the rate is omega - 1 itself, and
			// the relation says nothing; a fixed margin of 0.02 also hid a
			// rate of 0.9962 at omega 1.978 (optimum 1.988, 512^2), so
			// near 2 the margin shrinks with 2 - omega.
			margin := 0.02
			if r.backOff {
				margin = math.Min(margin, 0.25*(2-r.omega))
			}
			if steady && lam < 1 && lam > r.omega-1+margin {
				mu2 := (lam + r.omega - 1) * (lam + r.omega - 1) / (lam * r.omega * r.omega)
				if mu2 < 1 {
					top := 1.98
					if r.backOff {
						top = omegaCap
					}
					r.omega = math.Min(top, 2/(1+math.Sqrt(1-mu2)))
					r.since = n
				}
			}
		}
		return
	}
	r.best = math.Min(r.best, cur)
	// The rate is read early: the fast transient after a hand-over is over
	// within a few iterations, and every plain iteration before the switch
	// is one at the slow rate (measured, 8 x 128^2: finest-level iterations
	// 114 -> 101 at epsilon 16 and 323 -> 313 at epsilon 1 against reading
	// it after 30 over 10).
	const warm, span = 10, 5
	if n < warm {
		return
	}
	a, b := hist[n-1-span], hist[n-1]
	if !(a > 0 && b > 0 && b < a) {
		return
	}
	rho := math.Pow(b/a, 1.0/span)
	if rho < 0.5 { // converging fast already
		return
	}
	r.omega = math.Min(1.9, 2/(1+math.Sqrt(1-rho)))
	r.since = n
	r.best = cur // a plain residual
}

// unbalancedStage returns the level as the problem at epsilon eps sees it:
// the inputs are scaled by the kernel mass Z at the target epsilon (see
// setup), so a stage at another epsilon rescales them by Z(eps) / Z(target)
// to solve the same formulation there, not one whose masses are off by
// that ratio (measured: a warm start 10^5 off in mass that the slow mass
// mode then never corrected).
func (p *problem) unbalancedStage(lv *level, eps float64) *level {
	z := kernelMass(lv.cols, lv.dx, eps) * kernelMass(lv.rows, lv.dy, eps) / p.refMass
	out := *lv
	out.a = make([][]float64, len(lv.a))
	for k, a := range lv.a {
		out.a[k] = make([]float64, len(a))
		for i, x := range a {
			out.a[k][i] = x * z
		}
	}
	out.fillLogs()
	return &out
}

// lambdaAt is the exponent rho / (rho + eps) of the KL-relaxed updates at
// epsilon eps (Chizat et al. 2018); 1 when balanced.
func (p *problem) lambdaAt(eps float64) float64 {
	if p.rho == 0 {
		return 1
	}
	return p.rho / (p.rho + eps)
}

// logMarginal returns log b at pixel i of the level, given l[k] = log K u_k
// there and ld = log d (0 when plain): the fixed target of a transport, -Inf
// outside a mask, the weighted geometric mean (balanced) or the power mean of
// order 1 - lambda (unbalanced; Chizat et al. 2018), times d.
func (p *problem) logMarginal(lv *level, i int, l []float64, ld, lambda float64) float64 {
	if lv.lt != nil {
		return lv.lt[i]
	}
	if lv.mask != nil && !lv.mask[i] {
		return math.Inf(-1)
	}
	var s float64
	if lambda == 1 {
		for k, x := range l {
			if p.w[k] != 0 {
				s += p.w[k] * x
			}
		}
	} else {
		s = powerMeanLog(l, p.w, 1-lambda)
	}
	s += ld
	if math.IsNaN(s) {
		return math.Inf(-1)
	}
	return s
}

// maskLogB applies the rest of logMarginal's rule to a chunk of log b
// that an iteration summed itself (plain balanced problems, sum_k w_k
// log K u_k a line at a time): -Inf outside the mask and where the sum is
// NaN. i0 is the chunk's first pixel.
func maskLogB(lb []float64, lv *level, i0 int) {
	for i, x := range lb {
		if x != x || lv.mask != nil && !lv.mask[i0+i] {
			lb[i] = math.Inf(-1)
		}
	}
}

// powerMeanLog returns log((sum_k w_k exp(q l_k))^(1/q)), the log of the
// weighted power mean of order q of exp(l_k) (weights sum to one), written
// with log1p and expm1 around the largest term so that it stays accurate as
// q -> 0, where it tends to the geometric mean sum_k w_k l_k.
func powerMeanLog(l, w []float64, q float64) float64 {
	m := math.Inf(-1)
	for k, x := range l {
		if w[k] != 0 {
			m = math.Max(m, x)
		}
	}
	if math.IsInf(m, -1) {
		return m
	}
	var s float64
	for k, x := range l {
		if w[k] != 0 {
			s += w[k] * math.Expm1(q*(x-m))
		}
	}
	return m + math.Log1p(s)/q
}

// massMode accelerates the slow mode of an unbalanced barycenter: constant
// shifts beta_k of log v_k with sum_k w_k beta_k = 0 (how the inputs' plans
// share mass) leave b nearly unchanged (the power mean of order 1 - lambda
// is near the geometric one) and contract only by m = 1 - omega (1 -
// lambda^2) per iteration, which never ends as the penalty grows (lambda ->
// 1). It measures each plan's shift per iteration (the b-weighted mean
// change of log v_k), and once two successive shifts contract by m, as a
// pure mode does (Aitken's test), it jumps the rest of the way: the
// remaining geometric series, shift * m / (1 - m). This is the
// translation-invariant idea (Sejourne, Vialard, Peyre, AISTATS 2022)
// applied to the barycenter's own mode.
//
// dist is the mode's remaining distance to its fixed point as the last step
// measured it, max_k |shift_k| m / (1 - m); it is part of the residual.
type massMode struct {
	w, delta, prev []float64
	dist           float64
}

func newMassMode(p *problem) *massMode {
	if p.rho == 0 || p.product || len(p.w) < 2 {
		return nil
	}
	return &massMode{w: p.w, delta: make([]float64, len(p.w))}
}

// shifts returns the extra shift of each log v_k (nil: none this step).
func (m *massMode) shifts(lambda, omega float64) []float64 {
	if m == nil {
		return nil
	}
	var mean float64
	for k, d := range m.delta {
		mean += m.w[k] * d
	}
	rel := make([]float64, len(m.delta))
	for k, d := range m.delta {
		rel[k] = d - mean
	}
	prev := m.prev
	m.prev = rel
	rate := 1 - omega*(1-lambda*lambda)
	big := 0.0
	for _, r := range rel {
		big = math.Max(big, math.Abs(r))
	}
	m.dist = big * rate / (1 - rate)
	if prev == nil || !(rate < 1) || big < 1e-14 {
		return nil
	}
	for k, r := range rel {
		// Only inputs that take part in the mode need to agree with it.
		if math.Abs(r) < 1e-3*big {
			continue
		}
		if q := r / prev[k]; !(math.Abs(q-rate) <= 0.02*(1-rate)+1e-3) {
			return nil
		}
	}
	m.prev = nil // observe afresh after a jump
	for k := range rel {
		rel[k] *= rate / (1 - rate)
	}
	return rel
}

func shift(x []float64, t float64) {
	for i := range x {
		x[i] += t
	}
}

// violation accumulates the first-marginal violation sum_i |m_i - t_i| with
// Kahan summation: it is a small difference of unit masses.
type violation struct{ s, c float64 }

func (v *violation) add(m, t float64) {
	y := math.Abs(m-t) - v.c
	s := v.s + y
	v.c = (s - v.s) - y
	v.s = s
}

// sumAbsDiff returns sum_i |m_i - a_i|. The terms are nonnegative, so a
// plain sum is accurate to n ulp of the result itself (no cancellation);
// four partial sums instead of violation's compensated chain, which was 5%
// of a 128^2 solve.
func sumAbsDiff(m, a []float64) float64 {
	a = a[:len(m)]
	var s0, s1, s2, s3 float64
	i := 0
	for ; i+3 < len(m); i += 4 {
		s0 += math.Abs(m[i] - a[i])
		s1 += math.Abs(m[i+1] - a[i+1])
		s2 += math.Abs(m[i+2] - a[i+2])
		s3 += math.Abs(m[i+3] - a[i+3])
	}
	for ; i < len(m); i++ {
		s0 += math.Abs(m[i] - a[i])
	}
	return (s0 + s1) + (s2 + s3)
}

// value returns the violation relative to the input's mass (unbalanced
// inputs carry their own masses; the slow mass mode is measured apart, see
// massMode).
func (v *violation) value(mass float64) float64 { return v.s / mass }

// output returns b (given as log b) normalised to unit mass as a field on the
// full grid, and records b's own mass (the unbalanced barycenter's mass) in
// p.rawMass.
func (p *problem) output(lb []float64) *grid.Field {
	f := &grid.Field{Rows: p.rows, Cols: p.cols, Data: make([]float64, p.n)}
	m := math.Inf(-1)
	for _, x := range lb {
		m = math.Max(m, x)
	}
	for i, x := range lb {
		f.Data[i] = math.Exp(x - m)
	}
	p.rawMass = math.Exp(m) * grid.Sum(f.Data)
	if g, err := grid.Normalize(f); err == nil {
		return g
	}
	return f
}

func logOf(a []float64) []float64 {
	out := make([]float64, len(a))
	for i, x := range a {
		out[i] = math.Log(x)
	}
	return out
}
