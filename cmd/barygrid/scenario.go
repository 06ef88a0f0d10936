package main

import (
	"math"
	"math/rand/v2"

	"barygrid/gaussfit"
	"barygrid/grid"

	"gonum.org/v1/gonum/mat"
)

// The demo scenario is invented and made by code: stained nuclei in a
// microscope tile and members of a rain-rate ensemble over one storm cell.

// nuclei returns n nucleus-like blobs on a rows x cols tile (pixel 0.5 um):
// soft ellipses with random shift, orientation and elongation, a brighter
// rim, faint texture and camera background.
func nuclei(n, size int, seed uint64) []*grid.Field {
	rng := rand.New(rand.NewPCG(seed, 7))
	out := make([]*grid.Field, n)
	for k := range out {
		f := grid.New(size, size)
		f.Dx, f.Dy, f.Unit = 0.5, 0.5, "um"
		cx := float64(size)/2 + rng.NormFloat64()*float64(size)/14
		cy := float64(size)/2 + rng.NormFloat64()*float64(size)/14
		ang := rng.Float64() * math.Pi
		a := float64(size) * (0.14 + 0.04*rng.Float64())
		b := a * (0.55 + 0.35*rng.Float64())
		ca, sa := math.Cos(ang), math.Sin(ang)
		for r := 0; r < size; r++ {
			for c := 0; c < size; c++ {
				x, y := float64(c)-cx, float64(r)-cy
				u, v := (x*ca+y*sa)/a, (-x*sa+y*ca)/b
				rho := math.Sqrt(u*u + v*v)
				body := 1 / (1 + math.Exp((rho-1)/0.08))
				rim := 0.35 * math.Exp(-(rho-0.9)*(rho-0.9)/0.02)
				tex := 1 + 0.1*math.Sin(0.9*x+1.3*y+float64(k))
				f.Set(r, c, math.Round(200*(body*tex+rim*body)+12+3*rng.Float64()))
			}
		}
		out[k] = f
	}
	return out
}

// stormCell is one ensemble member's convective cell (pixels; mm/h).
type stormCell struct{ cx, cy, s, peak, tilt float64 }

// stormCells draws the n members' cells on a size x size grid.
func stormCells(n, size int, seed uint64) []stormCell {
	rng := rand.New(rand.NewPCG(seed, 11))
	out := make([]stormCell, n)
	for k := range out {
		out[k] = stormCell{
			cx:   float64(size)*0.45 + rng.NormFloat64()*float64(size)/10,
			cy:   float64(size)*0.5 + rng.NormFloat64()*float64(size)/12,
			s:    float64(size) * (0.05 + 0.02*rng.Float64()),
			peak: 40 + 25*rng.Float64(),
			tilt: 0.5 + 0.3*rng.NormFloat64(),
		}
	}
	return out
}

// storm returns n ensemble members of a rain-rate field (mm/h, 2 km pixels):
// one convective cell whose position, size and peak rate vary between
// members, embedded in weak stratiform rain, with a trailing band.
func storm(n, size int, seed uint64) []*grid.Field {
	out := make([]*grid.Field, n)
	for k, m := range stormCells(n, size, seed) {
		f := grid.New(size, size)
		f.Dx, f.Dy, f.Unit = 2, 2, "km"
		cx, cy, s, peak, tilt := m.cx, m.cy, m.s, m.peak, m.tilt
		for r := 0; r < size; r++ {
			for c := 0; c < size; c++ {
				x, y := float64(c)-cx, float64(r)-cy
				cell := peak * math.Exp(-(x*x+y*y)/(2*s*s))
				// trailing stratiform band behind the cell
				bx, by := x+2.5*s, y-tilt*(x+2.5*s)
				band := 4 * math.Exp(-by*by/(2*s*s*0.8)) / (1 + math.Exp(bx/(2*s)))
				if bx > 0 {
					band *= math.Exp(-bx / (4 * s))
				}
				v := cell + band
				if v < 0.1 {
					v = 0 // below the gauge threshold
				}
				f.Set(r, c, v)
			}
		}
		out[k] = f
	}
	return out
}

// lightning returns the flash density (flashes per km^2 per hour) of the
// members storm(n, size, seed) makes: a core narrower than the cell, a
// little ahead of its rain peak, stronger where the cell rains harder.
func lightning(n, size int, seed uint64) []*grid.Field {
	out := make([]*grid.Field, n)
	for k, m := range stormCells(n, size, seed) {
		f := grid.New(size, size)
		f.Dx, f.Dy, f.Unit = 2, 2, "km"
		for r := 0; r < size; r++ {
			for c := 0; c < size; c++ {
				x, y := float64(c)-m.cx-0.4*m.s, float64(r)-m.cy
				f.Set(r, c, m.peak/10*math.Exp(-(x*x+y*y)/(2*0.3*m.s*m.s)))
			}
		}
		out[k] = f
	}
	return out
}

// screen returns n invented Gaussian fits of nuclei in a large screen
// (um): centres spread over a 2 mm flow chamber, elongated covariances
// roughly aligned with the flow, axis lengths that vary from cell to cell.
func screen(n int, seed uint64) []gaussfit.Gaussian {
	rng := rand.New(rand.NewPCG(seed, 13))
	out := make([]gaussfit.Gaussian, n)
	for i := range out {
		a := 4 + 0.8*rng.NormFloat64()
		b := a * (0.55 + 0.3*rng.Float64())
		th := math.Pi/6 + 0.35*rng.NormFloat64() // aligned by the flow, +-20 degrees
		c, s := math.Cos(th), math.Sin(th)
		out[i] = gaussfit.Gaussian{
			Mean: []float64{2000 * rng.Float64(), 2000 * rng.Float64()},
			Cov: mat.NewSymDense(2, []float64{
				a*a*c*c + b*b*s*s, (a*a - b*b) * c * s,
				(a*a - b*b) * c * s, a*a*s*s + b*b*c*c,
			}),
		}
	}
	return out
}
