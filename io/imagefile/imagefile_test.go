package imagefile

import (
	"bytes"
	"encoding/binary"
	"fmt"
	"hash/crc32"
	"image"
	"image/color"
	"image/jpeg"
	"image/png"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"barygrid/grid"

	"golang.org/x/image/bmp"
)

func ramp16() *grid.Field {
	f := grid.New(5, 7)
	for i := range f.Data {
		f.Data[i] = float64(i * 1871 % 65536)
	}
	return f
}

// 16-bit integer samples survive PNG and TIFF exactly.
func TestRoundTrip16(t *testing.T) {
	f := ramp16()
	for name, w := range map[string]func(*bytes.Buffer) error{
		"png":  func(b *bytes.Buffer) error { _, err := WritePNG(b, f, WriteSettings{}); return err },
		"tiff": func(b *bytes.Buffer) error { _, err := WriteTIFF(b, f, WriteSettings{}); return err },
	} {
		var buf bytes.Buffer
		if err := w(&buf); err != nil {
			t.Fatal(err)
		}
		g, err := Read(buf.Bytes(), ReadSettings{})
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		for i := range f.Data {
			if g.Data[i] != f.Data[i] {
				t.Fatalf("%s: pixel %d = %v, want %v", name, i, g.Data[i], f.Data[i])
			}
		}
	}
}

func TestRoundTripScaled(t *testing.T) {
	f := grid.New(4, 4)
	for i := range f.Data {
		f.Data[i] = float64(i) / 1000
	}
	var buf bytes.Buffer
	sc, err := WritePNG(&buf, f, WriteSettings{EightBit: true})
	if err != nil {
		t.Fatal(err)
	}
	g, err := Read(buf.Bytes(), ReadSettings{})
	if err != nil {
		t.Fatal(err)
	}
	for i := range f.Data {
		if back := sc.Invert(g.Data[i]); back-f.Data[i] > 0.015/255+1e-12 || f.Data[i]-back > 0.015/255+1e-12 {
			t.Fatalf("pixel %d: %v -> %v", i, f.Data[i], back)
		}
	}
}

// Luminance uses the BT.709 weights (ITU-R BT.709, standard): pure green
// 255 reads as 0.7152 * 255; a half-transparent white as half of 255.
func TestColourAndAlpha(t *testing.T) {
	im := image.NewNRGBA(image.Rect(0, 0, 2, 1))
	im.Set(0, 0, color.NRGBA{0, 255, 0, 255})
	im.Set(1, 0, color.NRGBA{255, 255, 255, 128})
	var buf bytes.Buffer
	png.Encode(&buf, im)
	f, err := Read(buf.Bytes(), ReadSettings{})
	if err != nil {
		t.Fatal(err)
	}
	if d := f.Data[0] - 0.7152*255; d > 1e-9 || d < -1e-9 {
		t.Errorf("green = %v, want %v", f.Data[0], 0.7152*255)
	}
	if d := f.Data[1] - 128; d > 0.6 || d < -0.6 {
		t.Errorf("half-transparent white = %v, want about 128", f.Data[1])
	}
}

func TestJPEGAndBMP(t *testing.T) {
	im := image.NewGray(image.Rect(0, 0, 16, 8))
	for i := range im.Pix {
		im.Pix[i] = 100
	}
	var j, b bytes.Buffer
	jpeg.Encode(&j, im, &jpeg.Options{Quality: 95})
	bmp.Encode(&b, im)
	for name, data := range map[string][]byte{"jpeg": j.Bytes(), "bmp": b.Bytes()} {
		f, err := Read(data, ReadSettings{})
		if err != nil || f.Rows != 8 || f.Cols != 16 {
			t.Fatalf("%s: %v", name, err)
		}
		if d := f.Data[3] - 100; d > 2 || d < -2 {
			t.Errorf("%s: value %v, want 100", name, f.Data[3])
		}
	}
}

// hugePNG returns a valid PNG header declaring w x h pixels and no data.
func hugePNG(w, h uint32) []byte {
	var b bytes.Buffer
	b.WriteString("\x89PNG\r\n\x1a\n")
	ihdr := make([]byte, 13)
	binary.BigEndian.PutUint32(ihdr, w)
	binary.BigEndian.PutUint32(ihdr[4:], h)
	ihdr[8], ihdr[9] = 8, 0
	chunk := append([]byte("IHDR"), ihdr...)
	binary.Write(&b, binary.BigEndian, uint32(13))
	b.Write(chunk)
	binary.Write(&b, binary.BigEndian, crc32.ChecksumIEEE(chunk))
	return b.Bytes()
}

func TestRefusesHugeBeforeDecoding(t *testing.T) {
	_, err := Read(hugePNG(100000, 100000), ReadSettings{})
	if err == nil || !strings.Contains(err.Error(), "more than the limit") {
		t.Fatalf("got %v", err)
	}
}

func TestTruncated(t *testing.T) {
	var buf bytes.Buffer
	WritePNG(&buf, ramp16(), WriteSettings{})
	_, err := Read(buf.Bytes()[:buf.Len()-20], ReadSettings{})
	if err == nil {
		t.Fatal("truncated PNG accepted")
	}
}

func FuzzRead(f *testing.F) {
	var p bytes.Buffer
	WritePNG(&p, ramp16(), WriteSettings{})
	f.Add(p.Bytes())
	var t8 bytes.Buffer
	WriteTIFF(&t8, ramp16(), WriteSettings{EightBit: true})
	f.Add(t8.Bytes())
	f.Add(hugePNG(3, 3))
	for _, name := range []string{"pil_res_cm.tif", "pil_ome.tif", "pil_geotiff.tif"} {
		if data, err := os.ReadFile(filepath.Join("..", "..", "testdata", name)); err == nil {
			f.Add(data)
		}
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		// Decode, encode as 16-bit PNG, decode, encode, decode: the last two
		// fields are identical (images whose samples are integers are stored
		// as they are, so the first round may rescale, the second must not).
		g, err := Read(data, ReadSettings{MaxPixels: 1 << 16})
		if err != nil {
			return
		}
		round := func(f *grid.Field) *grid.Field {
			var buf bytes.Buffer
			if _, err := WritePNG(&buf, f, WriteSettings{}); err != nil {
				t.Fatalf("re-encode: %v", err)
			}
			h, err := Read(buf.Bytes(), ReadSettings{MaxPixels: 1 << 16})
			if err != nil {
				t.Fatalf("decode of the re-encoded image: %v", err)
			}
			return h
		}
		h := round(g)
		k := round(h)
		if h.Rows != g.Rows || h.Cols != g.Cols {
			t.Fatalf("round trip changed the shape %dx%d to %dx%d", g.Rows, g.Cols, h.Rows, h.Cols)
		}
		for i := range h.Data {
			if h.Data[i] != k.Data[i] {
				t.Fatalf("second round trip changed pixel %d: %v -> %v", i, h.Data[i], k.Data[i])
			}
		}
	})
}

// Files written by another encoder (Python's imaging library, see
// testdata/make_image_fixtures.py) read back with the values it stored:
// the ramp 37 r + 11 c, times 257 in the 16-bit files.
func TestFixturesFromPIL(t *testing.T) {
	for name, scale := range map[string]float64{"pil_gray8.png": 1, "pil_gray8.tif": 1, "pil_gray16.png": 257, "pil_gray16.tif": 257} {
		data, err := os.ReadFile(filepath.Join("..", "..", "testdata", name))
		if err != nil {
			t.Fatal(err)
		}
		f, err := Read(data, ReadSettings{})
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		if f.Rows != 4 || f.Cols != 5 {
			t.Fatalf("%s: %dx%d, want 4x5", name, f.Rows, f.Cols)
		}
		for r := 0; r < 4; r++ {
			for c := 0; c < 5; c++ {
				if want := scale * float64(37*r+11*c); f.At(r, c) != want {
					t.Errorf("%s: (%d, %d) = %v, want %v", name, r, c, f.At(r, c), want)
				}
			}
		}
	}
}

// The pixel size a TIFF carries, from files written by Python's imaging
// library (testdata/make_image_fixtures.py): resolution tags in inches and
// in centimetres (TIFF 6.0: pixels per unit), OME-XML physical sizes (the
// open OME schema), a GeoTIFF pixel scale (OGC GeoTIFF 1.1); a TIFF
// without any has none.
func TestTIFFPixelSize(t *testing.T) {
	for _, c := range []struct {
		file, unit, source string
		dx, dy             float64
	}{
		{"pil_res_inch.tif", "um", SourceTIFFResolution, 10, 5},
		{"pil_res_cm.tif", "um", SourceTIFFResolution, 5, 2.5},
		{"pil_ome.tif", "um", SourceOME, 0.65, 0.8},
		{"pil_geotiff.tif", "", SourceGeoTIFF, 250, 500},
		{"pil_gray8.tif", "", "", 1, 1},
	} {
		data, err := os.ReadFile(filepath.Join("..", "..", "testdata", c.file))
		if err != nil {
			t.Fatal(err)
		}
		f, err := Read(data, ReadSettings{})
		if err != nil {
			t.Fatalf("%s: %v", c.file, err)
		}
		dx, dy := f.PixelSize()
		if math.Abs(dx-c.dx) > 1e-9*c.dx || math.Abs(dy-c.dy) > 1e-9*c.dy || f.Unit != c.unit || f.PixelSizeSource != c.source {
			t.Errorf("%s: %g x %g %q from %q, want %g x %g %q from %q", c.file, dx, dy, f.Unit, f.PixelSizeSource, c.dx, c.dy, c.unit, c.source)
		}
	}
}

// A TIFF written with a pixel size in a length unit reads back with it
// (the resolution tags carry it, to 1e-6 relative), and Python's imaging
// library reads the same resolution (when it is installed).
func TestTIFFWritesPixelSize(t *testing.T) {
	f := ramp16()
	f.Dx, f.Dy, f.Unit = 0.325, 0.65, "um"
	var buf bytes.Buffer
	if _, err := WriteTIFF(&buf, f, WriteSettings{}); err != nil {
		t.Fatal(err)
	}
	g, err := Read(buf.Bytes(), ReadSettings{})
	if err != nil {
		t.Fatal(err)
	}
	dx, dy := g.PixelSize()
	if math.Abs(dx-0.325) > 1e-6 || math.Abs(dy-0.65) > 1e-6 || g.Unit != "um" || g.PixelSizeSource != SourceTIFFResolution {
		t.Errorf("read back %g x %g %q (%s)", dx, dy, g.Unit, g.PixelSizeSource)
	}
	for i := range f.Data {
		if g.Data[i] != f.Data[i] {
			t.Fatalf("value %d: %g, want %g", i, g.Data[i], f.Data[i])
		}
	}
	py := "/usr/bin/python3"
	if exec.Command(py, "-c", "import PIL").Run() != nil {
		t.Skip("Python's imaging library is not installed")
	}
	p := filepath.Join(t.TempDir(), "w.tif")
	os.WriteFile(p, buf.Bytes(), 0o644)
	out, err := exec.Command(py, "-c", "from PIL import Image; import sys; im=Image.open(sys.argv[1]); print(round(float(im.tag_v2[282]),3), round(float(im.tag_v2[283]),3), im.tag_v2[296], im.size)", p).CombinedOutput()
	if err != nil {
		t.Fatalf("PIL: %v %s", err, out)
	}
	// 0.325 um = 3.25e-5 cm: 30769.231 pixels per cm; 0.65 um: 15384.615.
	if got := strings.TrimSpace(string(out)); got != fmt.Sprintf("30769.231 15384.615 3 (%d, %d)", f.Cols, f.Rows) {
		t.Errorf("PIL reads %q", got)
	}
}

// A 3-page TIFF written by Python's imaging library: three pages, page k
// holds the ramp plus 50 k; a page past the end is an error.
func TestTIFFPages(t *testing.T) {
	data, err := os.ReadFile(filepath.Join("..", "..", "testdata", "pil_stack.tif"))
	if err != nil {
		t.Fatal(err)
	}
	if n := TIFFPages(data); n != 3 {
		t.Fatalf("%d pages, want 3", n)
	}
	for k := 0; k < 3; k++ {
		f, err := ReadPage(data, k, ReadSettings{})
		if err != nil {
			t.Fatal(err)
		}
		if want := float64(37*2 + 11*3 + 50*k); f.At(2, 3) != want {
			t.Errorf("page %d: (2, 3) = %g, want %g", k, f.At(2, 3), want)
		}
	}
	if _, err := ReadPage(data, 3, ReadSettings{}); err == nil {
		t.Error("page 3 of 3 accepted")
	}
}
