package gaussfile

import (
	"errors"
	"io"
	"strings"
	"testing"
)

// Lines parse to the Gaussians they hold; bad lines are errors naming the
// line.
func TestLineSource(t *testing.T) {
	src := NewLineSource(strings.NewReader("# fits\n{\"mean\": [1, 2], \"cov\": [[2, 0.5], [0.5, 1]]}\n\n{\"mean\": [0, 0], \"cov\": [[1, 0], [0, 1]], \"weight\": 3}"), "fits.jsonl")
	g, w, err := src.Next()
	if err != nil || g.Mean[1] != 2 || g.Cov.At(0, 1) != 0.5 || w != 1 {
		t.Fatalf("%v %v %v", g, w, err)
	}
	if _, w, err = src.Next(); err != nil || w != 3 {
		t.Fatalf("%v %v", w, err)
	}
	if _, _, err = src.Next(); !errors.Is(err, io.EOF) {
		t.Fatalf("%v, want EOF", err)
	}
	for _, bad := range []string{`{"mean": [1], "cov": [[1, 0], [0, 1]]}`, `{"mean": [1, 2], "cov": [[1, 2], [2, 1]]}`, `{"mean": [1, 2]`, `{"mu": [1, 2]}`} {
		_, _, err := NewLineSource(strings.NewReader("{\"mean\": [0, 0], \"cov\": [[1, 0], [0, 1]]}\n"+bad), "f.jsonl").Next()
		if err != nil {
			t.Fatalf("first line: %v", err)
		}
		src := NewLineSource(strings.NewReader("{\"mean\": [0, 0], \"cov\": [[1, 0], [0, 1]]}\n"+bad), "f.jsonl")
		src.Next()
		if _, _, err := src.Next(); err == nil || !strings.Contains(err.Error(), "f.jsonl: line 2") {
			t.Errorf("%q: %v", bad, err)
		}
	}
}
