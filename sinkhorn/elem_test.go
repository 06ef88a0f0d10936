package sinkhorn

import (
	"math"
	"math/rand/v2"
	"testing"
)

// The element-wise passes of the absorbed kernel (assembly where the CPU
// has AVX2, four lanes at a time) agree with their scalar forms, and so
// with math.Exp and math.Log, on lengths around the groups of four, with
// -Inf inputs (zero mass) and zero sums: near exactly, exp and log to a
// few units in the last place (FMA rounds once where the scalar code
// rounds twice; the reduction's tie rule differs).
func TestElementPasses(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	ninf := math.Inf(-1)
	for _, n := range []int{0, 1, 3, 4, 5, 8, 13, 64, 257} {
		for trial := range 20 {
			ref, src := make([]float64, n), make([]float64, n)
			for i := range ref {
				ref[i] = 3000 * (rng.Float64() - 0.5)
				src[i] = ref[i] + narrowMax*(2*rng.Float64()-1) + 1.5
				if rng.IntN(7) == 0 {
					ref[i], src[i] = ninf, ninf
				}
			}
			// near: bounds over finite entries; a lone -Inf is refused.
			lo, hi, ok := nearScan(src, ref)
			wlo, whi, wok := nearTail(src, ref, math.Inf(1), math.Inf(-1))
			if ok != wok || lo != wlo || hi != whi {
				t.Fatalf("n %d: near (%v %v %v), scalar (%v %v %v)", n, lo, hi, ok, wlo, whi, wok)
			}
			if n > 0 && trial%2 == 1 {
				k := rng.IntN(n)
				src[k], ref[k] = ninf, ref[k]+1
				if ref[k] == ninf {
					ref[k] = 0
				}
				if _, _, ok := nearScan(src, ref); ok {
					t.Fatalf("n %d: a -Inf against a finite reference at %d passed", n, k)
				}
				src[k], ref[k] = ninf, ninf
			}
			shift := (wlo + whi) / 2
			if math.IsInf(wlo, 0) {
				shift = 0
			}
			ee, want := make([]float64, n), make([]float64, n)
			expShift(ee, src, ref, shift)
			for i := range src {
				if src[i] == ninf {
					want[i] = 0
				} else {
					want[i] = math.Exp(src[i] - ref[i] - shift)
				}
				if math.Abs(ee[i]-want[i]) > 1e-15*want[i] {
					t.Fatalf("n %d: exp at %d = %.17g, math.Exp %.17g", n, i, ee[i], want[i])
				}
			}
			// exp of a sum, as the residual forms u K v; some arguments
			// beyond expNeg's range send the call to math.Exp.
			b := make([]float64, n)
			for i := range b {
				b[i] = -ref[i] - 10*rng.Float64()
				if trial == 3 && i == n/2 {
					b[i] += 2000 * (rng.Float64() - 0.5)
				}
			}
			m := make([]float64, n)
			expSum(m, src, b)
			for i := range src {
				w := 0.0
				if src[i] != ninf {
					w = math.Exp(src[i] + b[i])
				}
				if !(m[i] == w || (!math.IsInf(w, 0) && math.Abs(m[i]-w) <= 1e-15*w)) {
					t.Fatalf("n %d: exp of a sum at %d = %.17g, math.Exp %.17g", n, i, m[i], w)
				}
			}
			// log: sums as pass 2 leaves them, some zero.
			sums, out0 := make([]float64, n), make([]float64, n)
			for i := range sums {
				sums[i] = math.Exp(40 * (rng.Float64() - 0.5))
				if rng.IntN(9) == 0 {
					sums[i] = 0
				}
				out0[i] = 1000 * (rng.Float64() - 0.5)
			}
			got := append([]float64(nil), sums...)
			logAdd(got, out0, shift)
			for i, s := range sums {
				w := out0[i] + shift + math.Log(s)
				if s == 0 {
					if got[i] != ninf {
						t.Fatalf("n %d: log of a zero sum at %d = %v", n, i, got[i])
					}
					continue
				}
				if math.Abs(got[i]-w) > 4e-16*math.Max(1, math.Abs(w)) {
					t.Fatalf("n %d: log at %d = %.17g, math.Log %.17g", n, i, got[i], w)
				}
			}
		}
	}
}

// sumAbsDiff (four plain partial sums) agrees with the compensated sum of
// the same nonnegative terms to a few ulp of the result: without
// cancellation the plain sum's relative error is at most n ulp (standard
// fact, from memory: Higham, Accuracy and Stability, ch. 4).
func TestSumAbsDiff(t *testing.T) {
	rng := rand.New(rand.NewPCG(9, 10))
	for _, n := range []int{0, 1, 3, 4, 7, 256, 1001} {
		m, a := make([]float64, n), make([]float64, n)
		var v violation
		for i := range m {
			m[i] = math.Exp(30 * (rng.Float64() - 0.5))
			a[i] = m[i] * (1 + 1e-6*(rng.Float64()-0.5))
			v.add(m[i], a[i])
		}
		got := sumAbsDiff(m, a)
		if math.Abs(got-v.s) > 4*float64(n)*0x1p-53*v.s {
			t.Errorf("n %d: %.17g, compensated %.17g", n, got, v.s)
		}
	}
}

// The scaling iteration's element-wise passes (assembly where the CPU has
// AVX2) against their definitions: relaxDiv against relax of num / den
// (Thibault, Chizat, Dossal, Papadakis 2017's relaxed update in its
// rational form, as relax writes it), exactly where omega is 1 and to a few
// ulp otherwise (FMA); logAxpy against math.Log, with zeros, subnormals
// and infinities, which take math.Log.
func TestScalingElementPasses(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 12))
	for _, n := range []int{0, 1, 3, 4, 5, 8, 13, 257} {
		for range 20 {
			num, den, test, old := make([]float64, n), make([]float64, n), make([]float64, n), make([]float64, n)
			for i := range num {
				num[i] = math.Exp(60 * (rng.Float64() - 0.5))
				den[i] = math.Exp(60 * (rng.Float64() - 0.5))
				old[i] = num[i] / den[i] * math.Exp(rng.Float64()-0.5)
				test[i] = num[i]
				switch rng.IntN(8) {
				case 0:
					num[i], test[i] = 0, 0
				case 1:
					old[i] = 0
				case 2:
					test[i] = -1
				}
			}
			for _, omega := range []float64{1, 1.5, 1.95} {
				got := append([]float64(nil), old...)
				relaxDiv(got, num, den, test, omega)
				for i := range got {
					tt := 0.0
					if test[i] > 0 {
						tt = num[i] / den[i]
					}
					w := relax(old[i], tt, omega)
					if omega == 1 && got[i] != w || math.Abs(got[i]-w) > 8e-16*w {
						t.Fatalf("n %d, omega %g: relaxDiv at %d = %.17g, relax %.17g", n, omega, i, got[i], w)
					}
				}
			}
			x, acc := make([]float64, n), make([]float64, n)
			for i := range x {
				x[i] = math.Exp(1400 * (rng.Float64() - 0.5))
				acc[i] = 50 * (rng.Float64() - 0.5)
				switch rng.IntN(12) {
				case 0:
					x[i] = 0
				case 1:
					x[i] = 0x1p-1060 // subnormal
				case 2:
					x[i] = math.Inf(1)
				}
			}
			w := rng.Float64()
			got := append([]float64(nil), acc...)
			logAxpy(got, x, w)
			for i := range got {
				want := acc[i] + w*math.Log(x[i])
				if !(got[i] == want || math.Abs(got[i]-want) <= 8e-16*(math.Abs(acc[i])+math.Abs(w*math.Log(x[i])))) {
					t.Fatalf("n %d: logAxpy at %d (x %g) = %.17g, math.Log %.17g", n, i, x[i], got[i], want)
				}
			}
		}
	}
}

// inRange (assembly where the CPU has AVX2) against its scalar form, on
// states with one planted violation of each kind, NaN included.
func TestInRange(t *testing.T) {
	rng := rand.New(rand.NewPCG(13, 14))
	for _, n := range []int{1, 3, 4, 5, 8, 13, 64} {
		for kind := range 9 {
			a, kv, u, b, v := make([]float64, n), make([]float64, n), make([]float64, n), make([]float64, n), make([]float64, n)
			for i := range a {
				a[i], b[i] = rng.Float64(), rng.Float64()
				if rng.IntN(5) == 0 {
					a[i] = 0
				}
				kv[i], u[i], v[i] = math.Exp(200*(rng.Float64()-0.5)), math.Exp(200*(rng.Float64()-0.5)), math.Exp(200*(rng.Float64()-0.5))
			}
			i := rng.IntN(n)
			a[i], b[i] = 1, 1
			switch kind {
			case 1:
				kv[i] = 1e-310
			case 2:
				u[i] = 0
			case 3:
				v[i] = 1e-301
			case 4:
				u[i] = 1e301
			case 5:
				v[i] = math.Inf(1)
			case 6:
				u[i] = math.NaN()
			case 7:
				a[i], u[i], kv[i] = 0, 1e-305, 0 // no mass: small u and K v allowed
			case 8:
				b[i], v[i] = 0, 0 // no barycenter mass: v may vanish
			}
			want := kind == 0 || kind == 7 || kind == 8
			if got, ref := inRange(a, kv, u, b, v, tiny, huge), inRangeGo(a, kv, u, b, v, tiny, huge); got != ref || got != want {
				t.Errorf("n %d, kind %d: inRange %v, scalar %v, want %v", n, kind, got, ref, want)
			}
		}
	}
}

// relaxLog (assembly where the CPU has AVX2) against the log-domain
// update it replaces, written out: t = p - q, -Inf where p is -Inf (or q,
// with both), over-relaxed against a finite old value; to a few ulp of the
// terms (FMA rounds once).
func TestRelaxLog(t *testing.T) {
	rng := rand.New(rand.NewPCG(15, 16))
	ninf := math.Inf(-1)
	for _, n := range []int{0, 1, 3, 4, 5, 8, 13, 257} {
		p, q, old := make([]float64, n), make([]float64, n), make([]float64, n)
		for i := range p {
			p[i], q[i], old[i] = 400*(rng.Float64()-0.5), 400*(rng.Float64()-0.5), 400*(rng.Float64()-0.5)
			switch rng.IntN(8) {
			case 0:
				p[i] = ninf
			case 1:
				q[i] = ninf
			case 2:
				old[i] = ninf
			}
		}
		for _, omega := range []float64{1, 1.5, 1.97} {
			for _, both := range []bool{false, true} {
				got := append([]float64(nil), old...)
				relaxLog(got, p, q, omega, both)
				for i := range got {
					w := p[i] - q[i]
					if p[i] == ninf || both && q[i] == ninf {
						w = ninf
					} else if omega != 1 && old[i] != ninf {
						w = (1-omega)*old[i] + omega*w
					}
					scale := math.Abs(p[i]) + math.Abs(q[i]) + math.Abs(old[i])
					if !(got[i] == w || math.Abs(got[i]-w) <= 8e-16*omega*scale) {
						t.Fatalf("n %d, omega %g, both %v: at %d %.17g, want %.17g", n, omega, both, i, got[i], w)
					}
				}
			}
		}
	}
}

// transpose (4 x 4 tiles in AVX2 registers, the rest in Go) against the
// definition dst[c rows + r] = src[r cols + c], on every shape up to 13 x 13
// (tiles and both tails) and on a 128 x 128 and a 37 x 258 grid.
func TestTranspose(t *testing.T) {
	check := func(rows, cols int) {
		src := make([]float64, rows*cols)
		for i := range src {
			src[i] = float64(i) + 0.5
		}
		dst := make([]float64, rows*cols)
		for i := range dst {
			dst[i] = math.NaN()
		}
		transpose(dst, src, rows, cols)
		for r := range rows {
			for c := range cols {
				if dst[c*rows+r] != src[r*cols+c] {
					t.Fatalf("%d x %d: dst[%d][%d] = %v, want %v", rows, cols, c, r, dst[c*rows+r], src[r*cols+c])
				}
			}
		}
	}
	for rows := 1; rows <= 13; rows++ {
		for cols := 1; cols <= 13; cols++ {
			check(rows, cols)
		}
	}
	check(128, 128)
	check(37, 258)
	check(258, 37)
}
