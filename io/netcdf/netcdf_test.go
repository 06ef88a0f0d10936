package netcdf

import (
	"barygrid/grid"
	"bytes"
	"errors"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
)

func fixture(t *testing.T, name string) []byte {
	t.Helper()
	data, err := os.ReadFile(filepath.Join("..", "..", "testdata", name))
	if err != nil {
		t.Fatal(err)
	}
	return data
}

// Files written by SciPy (CDF-1, CDF-2) and by ncgen of the NetCDF tools
// (CDF-5), see testdata/make_netcdf_fixtures.py: the packed ramp
// 10 t + 3 r + c read back through scale_factor 0.5 and add_offset 1,
// exactly, with the pixel size (2 km) and unit from the coordinates.
func TestReadsIndependentWriters(t *testing.T) {
	for _, name := range []string{"nc_cdf1.nc", "nc_cdf2.nc", "nc_cdf5.nc"} {
		for _, tt := range []int{0, 1} {
			f, info, err := Read(fixture(t, name), Settings{Variable: "rain", Index: map[string]int{"time": tt}, FillAsZero: true})
			if err != nil {
				t.Fatalf("%s: %v", name, err)
			}
			if f.Rows != 3 || f.Cols != 4 || f.Dx != 2 || f.Dy != 2 || f.Unit != "km" || info.Units != "mm/h" || info.Planes != 2 {
				t.Fatalf("%s: %dx%d, %g x %g %q, units %q, planes %d", name, f.Rows, f.Cols, f.Dx, f.Dy, f.Unit, info.Units, info.Planes)
			}
			for r := 0; r < 3; r++ {
				for c := 0; c < 4; c++ {
					want := 0.5*float64(10*tt+3*r+c) + 1
					if name == "nc_cdf2.nc" && tt == 1 && r == 2 && c == 3 {
						want = 0 // the fill value, mapped to zero
					}
					if f.At(r, c) != want {
						t.Errorf("%s t=%d: (%d, %d) = %g, want %g", name, tt, r, c, f.At(r, c), want)
					}
				}
			}
		}
	}
}

// Fill values are an error unless mapped to zero; a NetCDF-4 file is
// refused with the conversion command; a wrong name, a missing index and a
// truncated file are clear errors.
func TestRefusals(t *testing.T) {
	_, _, err := Read(fixture(t, "nc_cdf2.nc"), Settings{Variable: "rain", Index: map[string]int{"time": 1}})
	if err == nil || !strings.Contains(err.Error(), "fill") {
		t.Errorf("fill value: %v", err)
	}
	_, _, err = Read(fixture(t, "nc_netcdf4.nc"), Settings{})
	if !errors.Is(err, ErrFormat) || !strings.Contains(err.Error(), "nccopy -k") {
		t.Errorf("NetCDF-4: %v", err)
	}
	if _, _, err := Read(fixture(t, "nc_cdf1.nc"), Settings{Variable: "snow"}); err == nil || !strings.Contains(err.Error(), "rain") {
		t.Errorf("unknown variable: %v", err)
	}
	if _, _, err := Read(fixture(t, "nc_cdf1.nc"), Settings{Variable: "rain", Index: map[string]int{"time": 5}}); err == nil {
		t.Error("index outside the dimension accepted")
	}
	data := fixture(t, "nc_cdf1.nc")
	for _, cut := range []int{10, 60, len(data) - 20} {
		if _, _, err := Read(data[:cut], Settings{Variable: "rain"}); err == nil {
			t.Errorf("file cut at %d accepted", cut)
		}
	}
}

// A header that declares a huge variable is refused before anything is
// allocated.
func TestHugeDeclaredSize(t *testing.T) {
	data := append([]byte(nil), fixture(t, "nc_cdf1.nc")...)
	// The y dimension's length sits after "CDF\x01", numrecs, the list tag
	// and count, and the "time" dimension; patch y = 3 into 2^30.
	i := strings.Index(string(data), "y\x00\x00\x00")
	if i < 0 {
		t.Fatal("no y dimension in the fixture")
	}
	copy(data[i+4:], []byte{0x40, 0, 0, 0})
	_, _, err := Read(data, Settings{Variable: "rain", Index: map[string]int{"time": 0}})
	// Either check refuses it before reading data: the declared extent
	// against the file's length, or the slice against the size limit.
	if err == nil || !(strings.Contains(err.Error(), "limit") || strings.Contains(err.Error(), "past the end")) {
		t.Errorf("huge declared size: %v", err)
	}
}

// Latitude-longitude coordinates (1 degree steps around 60 N): converted to
// km at the centre latitude (111.19 km per degree of latitude, times
// cos 60 along longitude), or kept in degrees when asked.
func TestLatLon(t *testing.T) {
	f, info, err := Read(fixture(t, "nc_latlon.nc"), Settings{})
	if err != nil {
		t.Fatal(err)
	}
	km := 6371 * math.Pi / 180
	if math.Abs(f.Dy-km) > 1e-9 || math.Abs(f.Dx-km*0.5) > 1e-9 || f.Unit != "km" || !strings.Contains(info.Note, "km") {
		t.Errorf("%g x %g %q (%s)", f.Dx, f.Dy, f.Unit, info.Note)
	}
	if f.At(2, 3) != 281 {
		t.Errorf("value %g, want 281", f.At(2, 3))
	}
	g, info, _ := Read(fixture(t, "nc_latlon.nc"), Settings{Degrees: true})
	if g.Dx != 1 || g.Unit != "degrees" || !strings.Contains(info.Note, "degrees") {
		t.Errorf("degrees: %g %q (%s)", g.Dx, g.Unit, info.Note)
	}
}

// Whatever the reader accepts is a field of the size it says; nothing
// panics on hostile input.
func FuzzRead(f *testing.F) {
	for _, name := range []string{"nc_cdf1.nc", "nc_cdf2.nc", "nc_cdf5.nc", "nc_latlon.nc"} {
		if data, err := os.ReadFile(filepath.Join("..", "..", "testdata", name)); err == nil {
			f.Add(data)
		}
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		g, _, err := Read(data, Settings{FillAsZero: true, Index: map[string]int{"time": 0}})
		if err != nil {
			return
		}
		// The same bytes read again give the same field (no state, no
		// dependence on allocation).
		h, _, err := Read(data, Settings{FillAsZero: true, Index: map[string]int{"time": 0}})
		if err != nil || h.Rows != g.Rows || h.Cols != g.Cols {
			t.Fatalf("second read differs: %v", err)
		}
		for i := range g.Data {
			if math.Float64bits(g.Data[i]) != math.Float64bits(h.Data[i]) {
				t.Fatalf("second read differs at %d", i)
			}
		}
	})
}

// A field written by Write reads back exactly with its pixel size and
// unit, and SciPy (an independent reader, when installed) reads the same
// values, coordinates and units.
func TestWriteRoundTrip(t *testing.T) {
	f := grid.New(3, 5)
	for i := range f.Data {
		f.Data[i] = float64(i) * 0.25
	}
	f.Dx, f.Dy, f.Unit = 2, 4, "km"
	var buf bytes.Buffer
	if err := Write(&buf, f, WriteSettings{Variable: "rain", Units: "mm/h", X0: 100, Y0: 10}); err != nil {
		t.Fatal(err)
	}
	g, info, err := Read(buf.Bytes(), Settings{})
	if err != nil {
		t.Fatal(err)
	}
	if g.Dx != 2 || g.Dy != 4 || g.Unit != "km" || info.Units != "mm/h" || info.Variable != "rain" {
		t.Errorf("%g x %g %q, units %q, variable %q", g.Dx, g.Dy, g.Unit, info.Units, info.Variable)
	}
	for i := range f.Data {
		if g.Data[i] != f.Data[i] {
			t.Fatalf("value %d: %g, want %g", i, g.Data[i], f.Data[i])
		}
	}
	py := "/usr/bin/python3"
	if exec.Command(py, "-c", "import scipy.io").Run() != nil {
		t.Skip("SciPy is not installed")
	}
	p := filepath.Join(t.TempDir(), "w.nc")
	os.WriteFile(p, buf.Bytes(), 0o644)
	out, err := exec.Command(py, "-c", `import sys
from scipy.io import netcdf_file
f = netcdf_file(sys.argv[1], "r", mmap=False)
v = f.variables["rain"]
print(v.shape, float(v[2, 4]), v.units.decode(), list(f.variables["x"][:2]), f.variables["x"].units.decode(), list(f.variables["y"][:2]))`, p).CombinedOutput()
	if err != nil {
		t.Fatalf("SciPy: %v %s", err, out)
	}
	if got := strings.TrimSpace(string(out)); got != "(3, 5) 3.5 mm/h [100.0, 102.0] km [10.0, 14.0]" {
		t.Errorf("SciPy reads %q", got)
	}
}
