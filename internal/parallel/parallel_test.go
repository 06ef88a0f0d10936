package parallel

import (
	"strings"
	"testing"
)

// A panic in a worker reaches the caller's goroutine, where a deferred
// recover (the command line's) can turn it into an error, instead of
// killing the process.
func TestParallelCarriesPanics(t *testing.T) {
	for _, workers := range []int{1, 2, 4} {
		func() {
			defer func() {
				r := recover()
				if r == nil || !strings.Contains(r.(error).Error(), "boom") {
					t.Errorf("workers %d: recovered %v", workers, r)
				}
			}()
			For(8, workers, func(i int) {
				if i == 5 {
					panic(errorString("boom"))
				}
			})
		}()
	}
}

type errorString string

func (e errorString) Error() string { return string(e) }

// Every index is visited once, whatever the number of workers.
func TestParallelDeterministic(t *testing.T) {
	out := make([]int, 100)
	For(100, 7, func(i int) { out[i] = i * i })
	for i, v := range out {
		if v != i*i {
			t.Fatalf("slot %d = %d", i, v)
		}
	}
}
