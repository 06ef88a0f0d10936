package fieldfile

import (
	"encoding/binary"
	"errors"
	"hash/crc32"
	"image"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"barygrid/grid"
)

func sample() *grid.Field {
	f := grid.New(6, 5)
	for i := range f.Data {
		f.Data[i] = float64((i*7919)%1000 + 1)
	}
	return f
}

// Every writer's output reads back: exactly for .npy, .csv and integer
// 16-bit .png/.tif.
func TestRoundTripAllFormats(t *testing.T) {
	dir := t.TempDir()
	f := sample()
	for _, ext := range []string{".npy", ".csv", ".png", ".tif", ".nc"} {
		p := filepath.Join(dir, "f"+ext)
		if _, err := Save(p, f, SaveSettings{}); err != nil {
			t.Fatal(err)
		}
		g, err := Load(p, LoadSettings{})
		if err != nil {
			t.Fatalf("%s: %v", ext, err)
		}
		for i := range f.Data {
			if g.Data[i] != f.Data[i] {
				t.Fatalf("%s: value %d = %v, want %v", ext, i, g.Data[i], f.Data[i])
			}
		}
	}
	// A picture saved with SaveImage reads back as a field of its size.
	p := filepath.Join(dir, "c.png")
	im := image.NewNRGBA(image.Rect(0, 0, f.Cols, f.Rows))
	if err := SaveImage(p, im, false); err != nil {
		t.Fatal(err)
	}
	if g, err := Load(p, LoadSettings{SkipValidate: true}); err != nil || g.Rows != f.Rows || g.Cols != f.Cols {
		t.Fatal(g, err)
	}
	if err := SaveImage(p, im, false); !errors.Is(err, ErrExists) {
		t.Fatalf("second SaveImage: %v, want ErrExists", err)
	}
}

func TestNoClobber(t *testing.T) {
	dir := t.TempDir()
	p := filepath.Join(dir, "out.npy")
	os.WriteFile(p, []byte("keep"), 0o644)
	_, err := Save(p, sample(), SaveSettings{})
	if !errors.Is(err, ErrExists) {
		t.Fatalf("got %v, want ErrExists", err)
	}
	if b, _ := os.ReadFile(p); string(b) != "keep" {
		t.Fatal("existing file was changed")
	}
	if _, err := Save(p, sample(), SaveSettings{Force: true}); err != nil {
		t.Fatal(err)
	}
	if _, err := Load(p, LoadSettings{}); err != nil {
		t.Fatal(err)
	}
	entries, _ := os.ReadDir(dir)
	if len(entries) != 1 {
		t.Fatalf("temporary files left behind: %v", entries)
	}
}

// Bad inputs: each gives an error naming the file and the cause.
func TestBadInputs(t *testing.T) {
	dir := t.TempDir()
	good := filepath.Join(dir, "good.png")
	if _, err := Save(good, sample(), SaveSettings{}); err != nil {
		t.Fatal(err)
	}
	png, _ := os.ReadFile(good)
	npy3d, _ := os.ReadFile(filepath.Join("..", "..", "testdata", "bad_3d.npy"))
	npyc, _ := os.ReadFile(filepath.Join("..", "..", "testdata", "bad_complex.npy"))
	cases := []struct {
		name, file string
		data       []byte
		want       string
	}{
		{"empty", "e.csv", nil, "empty file"},
		{"truncated png", "t.png", png[:len(png)/2], "imagefile"},
		{"text named png", "x.png", []byte("1,2\n3,4\n"), "is not a PNG image"},
		{"ragged csv", "r.csv", []byte("1,2\n3\n"), "ragged"},
		{"nan csv", "n.csv", []byte("1,2\nNaN,4\n"), "not a finite value"},
		{"inf csv", "i.csv", []byte("1,inf\n3,4\n"), "not a finite value"},
		{"words csv", "w.csv", []byte("1,2\n3,four\n"), "is not a number"},
		{"3-d npy", "a.npy", npy3d, "want 2-D"},
		{"complex npy", "c.npy", npyc, "complex"},
		{"all zero", "z.csv", []byte("0,0\n0,0\n"), "no positive mass"},
		{"negative", "m.csv", []byte("1,2\n-3,4\n"), "negative at row 1, column 0"},
		{"huge png header", "h.png", hugePNGHeader(), "more than the limit"},
	}
	for _, tc := range cases {
		p := filepath.Join(dir, tc.file)
		os.WriteFile(p, tc.data, 0o644)
		_, err := Load(p, LoadSettings{})
		if err == nil || !strings.Contains(err.Error(), tc.want) || !strings.HasPrefix(err.Error(), p+": ") {
			t.Errorf("%s: got %v, want %q after the file name", tc.name, err, tc.want)
		}
		if err != nil && strings.Contains(err.Error(), "\n") {
			t.Errorf("%s: error spans lines: %q", tc.name, err)
		}
	}
	if _, err := Load(filepath.Join(dir, "missing.png"), LoadSettings{}); err == nil || !strings.Contains(err.Error(), "no such file") {
		t.Errorf("missing file: got %v", err)
	}
}

// hugePNGHeader is a valid PNG signature and IHDR declaring 100000 x 100000
// 8-bit gray pixels, and no image data.
func hugePNGHeader() []byte {
	chunk := []byte("IHDR\x00\x01\x86\xa0\x00\x01\x86\xa0\x08\x00\x00\x00\x00")
	out := append([]byte("\x89PNG\r\n\x1a\n\x00\x00\x00\x0d"), chunk...)
	return binary.BigEndian.AppendUint32(out, crc32.ChecksumIEEE(chunk))
}

func TestPreprocessing(t *testing.T) {
	f := &grid.Field{Rows: 1, Cols: 4, Data: []float64{10, 10, 50, 10}}
	g, err := Prepare(f.Clone(), LoadSettings{Invert: true, Dx: 0.5})
	if err != nil {
		t.Fatal(err)
	}
	if g.Data[0] != 40 || g.Data[2] != 0 || g.Dx != 0.5 || g.Dy != 0.5 {
		t.Errorf("invert/pixel size: %+v", g)
	}
	g, err = Prepare(f.Clone(), LoadSettings{BackgroundPercentile: 50})
	if err != nil {
		t.Fatal(err)
	}
	if g.Data[0] != 0 || g.Data[2] != 40 {
		t.Errorf("background: %v", g.Data)
	}
}
