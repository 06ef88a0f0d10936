package pose

import (
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"barygrid/grid"
	"barygrid/sinkhorn"
)

// BenchmarkPose times pose normalisation (rotate, default rounds) of 32
// invented fields of 128 x 128 (the asymmetric test shape, twice as large,
// at random angles and places) against the plain barycenter of the same
// fields in the same run, and reports the ratio (target: at most 3x).
//
//	go test -run XXX -bench Pose -benchtime 1x ./pose
func BenchmarkPose(b *testing.B) {
	rng := rand.New(rand.NewPCG(7, 11))
	var fs []*grid.Field
	for range 32 {
		a := rng.Float64()*360 - 180
		cx, cy := 54+20*rng.Float64(), 54+20*rng.Float64()
		f := grid.New(128, 128)
		th := a * math.Pi / 180
		c, s := math.Cos(th), math.Sin(th)
		for r := 0; r < 128; r++ {
			for q := 0; q < 128; q++ {
				u, v := (float64(q)-cx)/2, -(float64(r)-cy)/2
				u0, v0 := c*u+s*v, -s*u+c*v
				body := math.Exp(-u0*u0/(2*36) - v0*v0/(2*5))
				bump := 0.8 * math.Exp(-((u0-6)*(u0-6)+(v0-4)*(v0-4))/(2*3))
				f.Set(r, q, body+bump)
			}
		}
		fs = append(fs, f)
	}
	for b.Loop() {
		t0 := time.Now()
		if _, err := sinkhorn.Barycenter(fs, sinkhorn.Settings{}); err != nil {
			b.Fatal(err)
		}
		plain := time.Since(t0)
		t0 = time.Now()
		if _, err := Normalize(fs, Settings{Mode: Rotate}); err != nil {
			b.Fatal(err)
		}
		posed := time.Since(t0)
		b.ReportMetric(plain.Seconds(), "s-plain")
		b.ReportMetric(posed.Seconds(), "s-pose")
		b.ReportMetric(posed.Seconds()/plain.Seconds(), "x-plain")
	}
}
