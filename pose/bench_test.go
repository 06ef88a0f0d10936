package pose

import (
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
		f := scaledShape(128, cx, cy, a, false, 2)
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
