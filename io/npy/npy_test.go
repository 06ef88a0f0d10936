package npy

import (
	"bytes"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"barygrid/grid"
)

// The fixtures were written by numpy (testdata/make_npy_fixtures.py); each
// holds the 2 x 3 array arange(6) (times 1.5, or 10000 for u2).
func TestReadNumpyFixtures(t *testing.T) {
	cases := map[string]float64{"f8_c.npy": 1.5, "f4_fortran.npy": 1.5, "u2_c.npy": 10000, "i4_be.npy": 1, "u1_c.npy": 1, "i8_c.npy": 1}
	for name, scale := range cases {
		data, err := os.ReadFile(filepath.Join("..", "..", "testdata", name))
		if err != nil {
			t.Fatal(err)
		}
		f, err := Read(data, ReadSettings{})
		if err != nil {
			t.Errorf("%s: %v", name, err)
			continue
		}
		if f.Rows != 2 || f.Cols != 3 {
			t.Errorf("%s: shape %dx%d, want 2x3", name, f.Rows, f.Cols)
			continue
		}
		for i, v := range f.Data {
			if v != float64(i)*scale {
				t.Errorf("%s: element %d = %g, want %g", name, i, v, float64(i)*scale)
			}
		}
	}
}

func TestRejects(t *testing.T) {
	for name, want := range map[string]string{"bad_3d.npy": "want 2-D", "bad_complex.npy": "complex"} {
		data, _ := os.ReadFile(filepath.Join("..", "..", "testdata", name))
		_, err := Read(data, ReadSettings{})
		if err == nil || !strings.Contains(err.Error(), want) {
			t.Errorf("%s: got %v, want an error containing %q", name, err, want)
		}
	}
	data, _ := os.ReadFile(filepath.Join("..", "..", "testdata", "f8_c.npy"))
	if _, err := Read(data[:len(data)-3], ReadSettings{}); err == nil || !strings.Contains(err.Error(), "truncated") {
		t.Errorf("truncated data: got %v", err)
	}
	if _, err := Read(data, ReadSettings{MaxPixels: 5}); err == nil || !strings.Contains(err.Error(), "limit") {
		t.Errorf("pixel limit: got %v", err)
	}
}

func TestRoundTripExact(t *testing.T) {
	f := grid.New(3, 4)
	for i := range f.Data {
		f.Data[i] = 1.0/float64(i+3) + 1e-300*float64(i)
	}
	var buf bytes.Buffer
	if err := Write(&buf, f); err != nil {
		t.Fatal(err)
	}
	g, err := Read(buf.Bytes(), ReadSettings{})
	if err != nil {
		t.Fatal(err)
	}
	for i := range f.Data {
		if f.Data[i] != g.Data[i] {
			t.Fatalf("element %d: %v != %v", i, g.Data[i], f.Data[i])
		}
	}
}

func FuzzRead(f *testing.F) {
	for _, name := range []string{"f8_c.npy", "f4_fortran.npy", "u2_c.npy", "i4_be.npy", "bad_3d.npy", "bad_complex.npy"} {
		data, err := os.ReadFile(filepath.Join("..", "..", "testdata", name))
		if err == nil {
			f.Add(data)
		}
	}
	f.Add([]byte("\x93NUMPY\x01\x00\x10\x00{'descr': '<f8'}"))
	f.Fuzz(func(t *testing.T, data []byte) {
		// Whatever decodes re-encodes (float64, exact) and decodes to the
		// same field (the round-trip property Go's image decoders fuzz).
		g, err := Read(data, ReadSettings{MaxPixels: 1 << 16})
		if err != nil {
			return
		}
		var buf bytes.Buffer
		if err := Write(&buf, g); err != nil {
			t.Fatalf("re-encode: %v", err)
		}
		h, err := Read(buf.Bytes(), ReadSettings{MaxPixels: 1 << 16})
		if err != nil {
			t.Fatalf("decode of the re-encoded file: %v", err)
		}
		if !grid.Identical(g, h) {
			t.Fatalf("round trip changed the field (%dx%d)", g.Rows, g.Cols)
		}
	})
}

// A 3-D array written by WriteArray reads back in numpy with its shape and
// values (checked with Debian's numpy when it is installed).
func TestWriteArrayNumpy(t *testing.T) {
	py := "/usr/bin/python3"
	if _, err := os.Stat(py); err != nil {
		t.Skip("no /usr/bin/python3")
	}
	if err := exec.Command(py, "-c", "import numpy").Run(); err != nil {
		t.Skip("numpy is not installed")
	}
	data := make([]float64, 3*4*2)
	for i := range data {
		data[i] = float64(i) + 0.25
	}
	p := filepath.Join(t.TempDir(), "a.npy")
	f, _ := os.Create(p)
	if err := WriteArray(f, []int{3, 4, 2}, data); err != nil {
		t.Fatal(err)
	}
	f.Close()
	out, err := exec.Command(py, "-c", "import numpy as np,sys; a=np.load(sys.argv[1]); print(a.shape, a[2,3,1], a.dtype)", p).CombinedOutput()
	if err != nil {
		t.Fatalf("numpy: %v %s", err, out)
	}
	if got := strings.TrimSpace(string(out)); got != "(3, 4, 2) 23.25 float64" {
		t.Errorf("numpy reads %q", got)
	}
}
