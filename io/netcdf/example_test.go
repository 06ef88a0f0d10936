package netcdf_test

import (
	"fmt"
	"os"

	"barygrid/io/netcdf"
)

// Read one plane of a rain variable written by SciPy, with CF scaling and
// the pixel size from its coordinates.
func ExampleRead() {
	data, err := os.ReadFile("../../testdata/nc_cdf1.nc")
	if err != nil {
		panic(err)
	}
	f, info, err := netcdf.Read(data, netcdf.Settings{Variable: "rain", Index: map[string]int{"time": 1}})
	if err != nil {
		panic(err)
	}
	fmt.Println(info.Dims, info.Units, info.Planes)
	fmt.Println(f.Rows, f.Cols, f.Dx, f.Unit, f.At(2, 3))
	// Output:
	// [time y x] mm/h 2
	// 3 4 2 km 10.5
}
