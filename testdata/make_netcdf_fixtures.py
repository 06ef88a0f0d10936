"""Writes NetCDF classic fixtures with writers independent of barygrid:
SciPy's scipy.io.netcdf_file (Debian's python3-scipy) for CDF-1 and CDF-2,
and ncgen from Debian's netcdf-bin for CDF-5 and NetCDF-4.

    apt-get install -y python3-scipy netcdf-bin && /usr/bin/python3 make_netcdf_fixtures.py

Every rain variable holds the packed ramp p[t][r][c] = 10*t + 3*r + c
(shorts), scale_factor 0.5, add_offset 1, on y = 0, 2, 4 km (3 rows) and
x = 0, 2, 4, 6 km (4 columns), with two times.
"""
import os
import subprocess

import numpy as np
from scipy.io import netcdf_file

here = os.path.dirname(__file__) or "."

def write(path, version, fill=False):
    f = netcdf_file(os.path.join(here, path), "w", version=version)
    f.createDimension("time", 2)
    f.createDimension("y", 3)
    f.createDimension("x", 4)
    x = f.createVariable("x", "d", ("x",))
    x[:] = [0, 2, 4, 6]
    x.units = "km"
    y = f.createVariable("y", "d", ("y",))
    y[:] = [0, 2, 4]
    y.units = "km"
    v = f.createVariable("rain", "h", ("time", "y", "x"))
    p = np.array([[[10 * t + 3 * r + c for c in range(4)] for r in range(3)] for t in range(2)], dtype="i2")
    if fill:
        p[1, 2, 3] = -999
        v._FillValue = np.int16(-999)
    v[:] = p
    v.scale_factor = 0.5
    v.add_offset = 1.0
    v.units = "mm/h"
    f.close()

write("nc_cdf1.nc", 1)
write("nc_cdf2.nc", 2, fill=True)

cdl = """netcdf cdf5 {
dimensions:
  time = 2 ; y = 3 ; x = 4 ;
variables:
  double x(x) ; x:units = "km" ;
  double y(y) ; y:units = "km" ;
  short rain(time, y, x) ;
    rain:scale_factor = 0.5 ; rain:add_offset = 1. ; rain:units = "mm/h" ;
data:
  x = 0, 2, 4, 6 ;
  y = 0, 2, 4 ;
  rain = 0, 1, 2, 3, 3, 4, 5, 6, 6, 7, 8, 9,
         10, 11, 12, 13, 13, 14, 15, 16, 16, 17, 18, 19 ;
}
"""
subprocess.run(["ncgen", "-k", "cdf5", "-o", os.path.join(here, "nc_cdf5.nc")], input=cdl.encode(), check=True)
subprocess.run(["ncgen", "-k", "nc4", "-o", os.path.join(here, "nc_netcdf4.nc")], input=cdl.replace("cdf5", "nc4").encode(), check=True)

# Latitude-longitude: 1 degree steps around 60 N.
f = netcdf_file(os.path.join(here, "nc_latlon.nc"), "w", version=1)
f.createDimension("lat", 3)
f.createDimension("lon", 4)
lat = f.createVariable("lat", "d", ("lat",)); lat[:] = [59, 60, 61]; lat.units = "degrees_north"
lon = f.createVariable("lon", "d", ("lon",)); lon[:] = [10, 11, 12, 13]; lon.units = "degrees_east"
t = f.createVariable("t2m", "f", ("lat", "lon")); t[:] = np.arange(12, dtype="f4").reshape(3, 4) + 270; t.units = "K"
f.close()
