package pose

import (
	"errors"
	"fmt"
	"math"

	"barygrid/gaussfit"
	"barygrid/grid"
	"barygrid/internal/parallel"
	"barygrid/sinkhorn"
)

// Mode selects what may change.
type Mode int

const (
	// None leaves the inputs as they are.
	None Mode = iota
	// Shift moves each input's centroid to the inputs' mean centroid.
	Shift
	// Rotate also turns each input about its centroid.
	Rotate
	// RotateFlip also allows a mirror image.
	RotateFlip
)

func (m Mode) String() string {
	return [...]string{"none", "shift", "rotate", "rotate-flip"}[m]
}

// ParseMode reads none, shift, rotate or rotate-flip.
func ParseMode(s string) (Mode, error) {
	for m := None; m <= RotateFlip; m++ {
		if m.String() == s {
			return m, nil
		}
	}
	return None, fmt.Errorf("pose: unknown mode %q (want none, shift, rotate or rotate-flip)", s)
}

// Settings of Normalize. The zero value leaves the inputs alone.
type Settings struct {
	Mode Mode
	// Rounds of choosing each input's half-turn, reflection and angle
	// against the template; zero means 2. Measured on 32 mixed invented
	// shapes of 128^2: pose took 4.2 times the plain barycenter with 2
	// rounds and 2.8 with 1, and the second round changed the template by
	// L1 0.25 (rings and crescents have no settled pose); on copies of one
	// shape both land within a degree.
	Rounds int
	// Solver settings of the templates and divergences (Weights are used
	// for the templates).
	Solver sinkhorn.Settings
}

// Transform relates one input to the template: the input is the template
// mirrored across the template's principal axis (when Flipped), turned by
// AngleDeg about its centre and moved by -Shift. Posing undid that.
type Transform struct {
	AngleDeg float64
	Flipped  bool
	// Shift is the centroid's displacement (physical units, x then y).
	Shift [2]float64
	// Lost is the fraction of mass carried off the grid by the move.
	Lost float64
}

// Result of Normalize.
type Result struct {
	// Posed are the inputs in the common pose (the template's frame).
	Posed      []*grid.Field
	Transforms []Transform
	// Template is the barycenter of the posed inputs, turned and moved into
	// the mean pose of the inputs.
	Template *grid.Field
	// Canonical is the same barycenter in the canonical frame (principal
	// axis along x, at the grid's centre), as the rounds built it.
	Canonical *grid.Field
	// Divergences of each posed input to the final canonical template, as
	// the search measures them (four times epsilon, 2 x 2 block sums on
	// grids of 64 pixels a side or more).
	Divergences []float64
	// Barycenter is the last solve's result (status, iterations).
	Barycenter *sinkhorn.Result
}

// Normalize poses the fields (one shape, one pixel size) and returns them
// with the template.
func Normalize(fs []*grid.Field, s Settings) (*Result, error) {
	if len(fs) == 0 {
		return nil, errors.New("pose: no fields")
	}
	if err := grid.SameShape(fs, nil); err != nil {
		return nil, err
	}
	rounds := s.Rounds
	if rounds == 0 {
		rounds = 2
	}
	n := len(fs)
	fits := make([]gaussfit.Gaussian, n)
	var cx, cy float64
	for i, f := range fs {
		g, _, err := gaussfit.Fit(f, gaussfit.FitSettings{})
		if err != nil {
			return nil, fmt.Errorf("pose: field %d: %w", i+1, err)
		}
		fits[i] = g
		cx += g.Mean[0] / float64(n)
		cy += g.Mean[1] / float64(n)
	}
	f0 := fs[0]
	dx, dy := f0.PixelSize()
	res := &Result{Transforms: make([]Transform, n), Posed: make([]*grid.Field, n)}
	if s.Mode == None {
		copy(res.Posed, fs)
		return finish(res, s)
	}
	if s.Mode == Shift {
		for i, f := range fs {
			t := Transform{Shift: [2]float64{cx - fits[i].Mean[0], cy - fits[i].Mean[1]}}
			res.Posed[i], t.Lost = place(f, [2]float64(fits[i].Mean), [2]float64{cx, cy}, 0, false)
			res.Transforms[i] = t
		}
		return finish(res, s)
	}
	// Canonical frame: principal axis along x, centroid at the grid's
	// centre, which keeps turned shapes inside the grid.
	centre := [2]float64{float64(f0.Cols-1) * dx / 2, float64(f0.Rows-1) * dy / 2}
	axis := make([]float64, n)
	for i, g := range fits {
		axis[i] = displayAngle(gaussfit.EllipseOf(g).Angle)
	}
	type choice struct {
		half bool // an extra half-turn
		flip bool
	}
	chosen := make([]choice, n)
	// extra refines each input's angle beyond its principal axis: an
	// asymmetric shape's axis is tilted from its mirror image's.
	extra := make([]float64, n)
	canon := func(i int, c choice) (*grid.Field, float64) {
		return place(fs[i], [2]float64(fits[i].Mean), centre, angleOf(axis[i], extra[i], c.half), c.flip)
	}
	var template *grid.Field
	var last *sinkhorn.Result
	for round := 0; round <= rounds; round++ {
		posed := make([]*grid.Field, n)
		for i := range fs {
			posed[i], _ = canon(i, chosen[i])
		}
		// The intermediate templates only guide the search and stop at a
		// looser tolerance. (Starting them from the last round's potentials
		// was measured slower: 108 s against 25 s, since a warm start skips
		// the coarse-to-fine stages.)
		ts := s.Solver
		if round < rounds {
			ts.Tol = math.Max(ts.Tol, 1e-4)
		}
		coarse := coarsener(f0)
		eps := ts.Epsilon
		if eps == 0 {
			eps = sinkhorn.DefaultEpsilon(f0.Rows, f0.Cols, dx, dy)
		}
		inner := searchSettings(s.Solver, eps)
		var ctemplate *grid.Field
		if round == 0 && rounds > 1 && min(f0.Rows, f0.Cols) >= 128 {
			// The first template only orders the principal axes it was
			// built from, and the search sees it coarsened and smoothed:
			// build it so, from coarsened inputs at the search's epsilon
			// (a tenth of the full template's time). Later rounds need the
			// full one: built coarse in every round, the angles ended 1.3
			// degrees off (measured). A coarse grid under 64 pixels a side
			// resolves too little of the shape: on the 64^2 test shapes the
			// worst angle went from 0.82 to 1.07 degrees off, on the same
			// shapes at 128^2 from 0.13 to 0.14.
			cs := make([]*grid.Field, n)
			for i, f := range posed {
				cs[i] = coarse(f)
			}
			cts := ts
			cts.Epsilon = inner.Epsilon
			r, err := sinkhorn.Barycenter(cs, cts)
			if err != nil {
				return nil, err
			}
			if r.Status != sinkhorn.Converged {
				return nil, fmt.Errorf("pose: template of round %d did not converge: %s", round+1, r.Message)
			}
			ctemplate = r.Barycenter
		} else {
			r, err := sinkhorn.Barycenter(posed, ts)
			if err != nil {
				return nil, err
			}
			if r.Status != sinkhorn.Converged {
				return nil, fmt.Errorf("pose: template of round %d did not converge: %s", round+1, r.Message)
			}
			template, last = r.Barycenter, r
			ctemplate = coarse(template)
		}
		copy(res.Posed, posed)
		if round == rounds {
			break
		}
		// Each input takes the half-turn and reflection closest to the
		// template, by the Sinkhorn divergence.
		var cands []choice
		for _, flip := range []bool{false, true} {
			if flip && s.Mode != RotateFlip {
				continue
			}
			for _, half := range []bool{false, true} {
				cands = append(cands, choice{half, flip})
			}
		}
		ds := make([][]float64, n)
		errs := make([]error, n)
		// The search compares poses, not templates (searchSettings,
		// coarsener).
		parallel.For(n, s.Solver.Workers, func(i int) {
			ds[i] = make([]float64, len(cands))
			for j, c := range cands {
				f, _ := canon(i, c)
				ds[i][j], _, errs[i] = gap(coarse(f), ctemplate, inner)
				if errs[i] != nil {
					return
				}
			}
		})
		if err := errors.Join(errs...); err != nil {
			return nil, err
		}
		for i := range fs {
			best := 0
			for j := range cands {
				if ds[i][j] < ds[i][best] {
					best = j
				}
			}
			chosen[i] = cands[best]
		}
		// Then each angle by successive parabolas through the divergence
		// at three angles h apart (h = 4 degrees, then 1): near its
		// minimum the divergence is smooth in the angle, and a parabola's
		// vertex lands within a small fraction of h of it in three
		// evaluations, where halving steps down to half a degree took ten
		// or more.
		parallel.For(n, s.Solver.Workers, func(i int) {
			// Neighbouring angles start from the potentials of the centre
			// angle: the input turned by a few degrees moves little mass.
			div := func(e float64, warm *sinkhorn.WarmStart) (float64, *sinkhorn.WarmStart) {
				f, _ := place(fs[i], [2]float64(fits[i].Mean), centre, angleOf(axis[i], e, chosen[i].half), chosen[i].flip)
				is := inner
				is.Warm = warm
				d, w, err := gap(coarse(f), ctemplate, is)
				if err != nil && errs[i] == nil {
					errs[i] = err
				}
				return d, w
			}
			e := extra[i]
			// The first search starts coarse; the last one ends at 1 degree;
			// a round between only nudges.
			var steps []float64
			if round == 0 {
				steps = append(steps, 4)
			}
			if round == rounds-1 || round > 0 {
				steps = append(steps, 1)
			}
			for _, h := range steps {
				e = vertex(e, h, div)
			}
			extra[i] = e
		})
		if err := errors.Join(errs...); err != nil {
			return nil, err
		}
	}
	// The mean pose: the handedness of the majority, and the circular mean
	// of the orientations of the inputs of that handedness (the others'
	// angles are read after mirroring, so they do not average with them).
	flips := 0
	for i := range fs {
		if chosen[i].flip {
			flips++
		}
	}
	flipMean := 2*flips > n
	var sx, sy float64
	ang := make([]float64, n)
	for i := range fs {
		ang[i] = angleOf(axis[i], extra[i], chosen[i].half)
		if chosen[i].flip == flipMean {
			sx += math.Cos(ang[i] * math.Pi / 180)
			sy += math.Sin(ang[i] * math.Pi / 180)
		}
	}
	mean := math.Atan2(sy, sx) * 180 / math.Pi
	for i := range fs {
		t := Transform{AngleDeg: wrap(ang[i] - mean), Flipped: chosen[i].flip != flipMean}
		t.Shift = [2]float64{centre[0] - fits[i].Mean[0], centre[1] - fits[i].Mean[1]}
		_, t.Lost = canon(i, chosen[i])
		res.Transforms[i] = t
	}
	res.Canonical, res.Barycenter = template, last
	// Back into the mean pose: mirror if most inputs were mirrored, turn by
	// the mean angle, centre on the mean centroid.
	tm, _ := grid.Normalize(template)
	back, _ := placeInverse(tm, centre, [2]float64{cx, cy}, mean, flipMean)
	res.Template = back
	res.Divergences = make([]float64, n)
	inner := searchSettings(s.Solver, last.Epsilon)
	coarse := coarsener(f0)
	ct := coarse(template)
	errs := make([]error, n)
	parallel.For(n, s.Solver.Workers, func(i int) {
		res.Divergences[i], _, errs[i] = sinkhorn.Divergence(coarse(res.Posed[i]), ct, inner)
	})
	return res, errors.Join(errs...)
}

// vertex returns the minimiser near e of the function div: the vertex of
// the parabola through e - h, e, e + h, after moving the three points by h
// (at most eight times) until the middle one is lowest; the vertex is kept
// within h of the middle point. div takes and returns a warm start for
// neighbouring evaluations.
func vertex(e, h float64, div func(float64, *sinkhorn.WarmStart) (float64, *sinkhorn.WarmStart)) float64 {
	d0, w := div(e, nil)
	lo, _ := div(e-h, w)
	hi, _ := div(e+h, w)
	for range 8 {
		if lo < d0 && lo <= hi {
			e, hi, d0 = e-h, d0, lo
			lo, _ = div(e-h, w)
		} else if hi < d0 {
			e, lo, d0 = e+h, d0, hi
			hi, _ = div(e+h, w)
		} else {
			break
		}
	}
	c := lo - 2*d0 + hi
	if !(c > 0) {
		return e
	}
	t := (lo - hi) / (2 * c)
	return e + h*math.Max(-1, math.Min(1, t))
}

// gap is what the search minimises: the entropic transport cost from a
// posed input to the template. The Sinkhorn divergence subtracts from it
// half the template's self-cost, the same for every candidate, and half
// the input's, which a turn or a mirror image does not change (up to the
// grid): minimising the cost minimises the divergence, at a third of the
// work.
func gap(f, template *grid.Field, s sinkhorn.Settings) (float64, *sinkhorn.WarmStart, error) {
	r, err := sinkhorn.Transport(f, template, s)
	if err != nil {
		return 0, nil, err
	}
	return r.Cost, r.Warm, nil
}

// searchSettings are those of the pose search: a smoother epsilon (four
// times the template's) and a looser tolerance tell poses apart at a
// fraction of the cost.
func searchSettings(s sinkhorn.Settings, eps float64) sinkhorn.Settings {
	s.Workers, s.Progress, s.Weights = 1, nil, nil
	s.Epsilon = 4 * eps
	s.Tol = math.Max(s.Tol, 1e-4)
	return s
}

// coarsener returns 2 x 2 block sums on grids of 64 pixels a side or more
// (a pose differs over the whole shape, not in its finest detail), else
// the identity.
func coarsener(f *grid.Field) func(*grid.Field) *grid.Field {
	if min(f.Rows, f.Cols) >= 64 {
		return halve
	}
	return func(f *grid.Field) *grid.Field { return f }
}

// finish computes the template of already posed inputs (none, shift).
func finish(res *Result, s Settings) (*Result, error) {
	r, err := sinkhorn.Barycenter(res.Posed, s.Solver)
	if err != nil {
		return nil, err
	}
	if r.Status != sinkhorn.Converged {
		return nil, fmt.Errorf("pose: template did not converge: %s", r.Message)
	}
	res.Template, res.Canonical, res.Barycenter = r.Barycenter, r.Barycenter, r
	return res, nil
}

// angleOf is an input's orientation: its principal axis, refined, with an
// extra half-turn.
func angleOf(axis, extra float64, half bool) float64 {
	a := axis + extra
	if half {
		a += 180
	}
	return a
}

// displayAngle converts the x-axis angle of the y-down pixel frame (radians)
// into degrees counter-clockwise as displayed.
func displayAngle(rad float64) float64 { return wrap(-rad * 180 / math.Pi) }

// wrap returns an angle in (-180, 180].
func wrap(a float64) float64 {
	a = math.Mod(a, 360)
	if a > 180 {
		a -= 360
	} else if a <= -180 {
		a += 360
	}
	return a
}

// place moves f so that the point from lands on to, after mirroring
// left-right about from (flip) and turning by -angle degrees (as
// displayed): the shape's orientation angle becomes 0. It returns the moved
// field and the fraction of mass that left the grid.
func place(f *grid.Field, from, to [2]float64, angle float64, flip bool) (*grid.Field, float64) {
	// Display frame: u = x, v = -y. Turning by -angle counter-clockwise is
	// turning by +angle clockwise.
	th := -angle * math.Pi / 180
	c, s := math.Cos(th), math.Sin(th)
	return moveRigid(f, func(x, y float64) (float64, float64) {
		u, v := x-from[0], -(y - from[1])
		if flip {
			// Mirror across the shape's own axis after turning: the same as
			// mirroring u before turning by the opposite angle.
			u2, v2 := c*u-s*v, s*u+c*v
			return to[0] + u2, to[1] + v2
		}
		u2, v2 := c*u-s*v, s*u+c*v
		return to[0] + u2, to[1] - v2
	})
}

// placeInverse undoes place: from the canonical frame at from, mirror
// (flip), turn by +angle and move to to.
func placeInverse(f *grid.Field, from, to [2]float64, angle float64, flip bool) (*grid.Field, float64) {
	th := angle * math.Pi / 180
	c, s := math.Cos(th), math.Sin(th)
	return moveRigid(f, func(x, y float64) (float64, float64) {
		u, v := x-from[0], -(y - from[1])
		if flip {
			v = -v
		}
		u2, v2 := c*u-s*v, s*u+c*v
		return to[0] + u2, to[1] - v2
	})
}

// moveRigid moves f by the rigid motion T (physical units). Each output pixel
// takes the bilinear interpolation of f at the pre-image of its centre: a
// rigid motion keeps areas, so the density carries over as it is. The result
// is then scaled to the mass that stays on the grid, counted exactly by
// sharing every input pixel's mass among the four pixels around its image
// (that sharing alone, used as the resampler, left a moire of up to 17% of
// the peak where turned pixels fall unevenly on the grid, TestMoveRigid,
// visible in the templates). It
// returns the moved field and the fraction of mass that left the grid.
func moveRigid(f *grid.Field, T func(x, y float64) (float64, float64)) (*grid.Field, float64) {
	dx, dy := f.PixelSize()
	// T is affine: its coefficients from three points, in pixel units.
	ox, oy := T(0, 0)
	ux, uy := T(dx, 0)
	vx, vy := T(0, dy)
	a, b := (ux-ox)/dx, (vx-ox)/dx // column of the image per column, per row
	c, d := (uy-oy)/dy, (vy-oy)/dy // row of the image per column, per row
	tx, ty := ox/dx, oy/dy
	det := a*d - b*c
	out := f.Like()
	var total, kept float64
	at := func(r, q int) float64 {
		if r < 0 || q < 0 || r >= f.Rows || q >= f.Cols {
			return 0
		}
		return f.Data[r*f.Cols+q]
	}
	for r := 0; r < f.Rows; r++ {
		for q := 0; q < f.Cols; q++ {
			m := f.Data[r*f.Cols+q]
			if m == 0 {
				continue
			}
			total += m
			px, py := a*float64(q)+b*float64(r)+tx, c*float64(q)+d*float64(r)+ty
			q0, r0 := math.Floor(px), math.Floor(py)
			fx, fy := px-q0, py-r0
			for _, s := range [4][3]float64{{r0, q0, (1 - fx) * (1 - fy)}, {r0, q0 + 1, fx * (1 - fy)}, {r0 + 1, q0, (1 - fx) * fy}, {r0 + 1, q0 + 1, fx * fy}} {
				if s[0] >= 0 && s[1] >= 0 && s[0] < float64(f.Rows) && s[1] < float64(f.Cols) {
					kept += m * s[2]
				}
			}
		}
	}
	if total == 0 || det == 0 {
		return out, 0
	}
	var sum float64
	for r := 0; r < f.Rows; r++ {
		for q := 0; q < f.Cols; q++ {
			// Pre-image of the output pixel (q, r).
			x, y := float64(q)-tx, float64(r)-ty
			sq, sr := (d*x-b*y)/det, (-c*x+a*y)/det
			q0, r0 := math.Floor(sq), math.Floor(sr)
			fx, fy := sq-q0, sr-r0
			iq, ir := int(q0), int(r0)
			v := (1-fx)*(1-fy)*at(ir, iq) + fx*(1-fy)*at(ir, iq+1) + (1-fx)*fy*at(ir+1, iq) + fx*fy*at(ir+1, iq+1)
			out.Data[r*f.Cols+q] = v
			sum += v
		}
	}
	if sum > 0 {
		k := kept / sum
		for i := range out.Data {
			out.Data[i] *= k
		}
	}
	return out, 1 - kept/total
}

// halve sums 2 x 2 blocks (an odd last row or column alone), doubling the
// pixel size: the same measure on a coarser grid.
func halve(f *grid.Field) *grid.Field {
	rows, cols := (f.Rows+1)/2, (f.Cols+1)/2
	g := grid.New(rows, cols)
	for r := 0; r < f.Rows; r++ {
		for c := 0; c < f.Cols; c++ {
			g.Data[(r/2)*cols+c/2] += f.Data[r*f.Cols+c]
		}
	}
	dx, dy := f.PixelSize()
	g.Dx, g.Dy, g.Unit = 2*dx, 2*dy, f.Unit
	return g
}
