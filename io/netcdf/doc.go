// Package netcdf reads 2-D fields from NetCDF classic files: CDF-1 (the
// classic format), CDF-2 (64-bit offsets) and CDF-5 (64-bit data), as the
// open format specification of Unidata describes them. A variable is chosen
// by name and a 2-D slice by index along its other dimensions; the CF
// conventions' scale_factor, add_offset, _FillValue and missing_value are
// applied; evenly spaced coordinate variables give the pixel size and their
// units attribute the unit.
//
// NetCDF-4 files are HDF5 inside and are refused with the standard tools'
// conversion command in the message.
package netcdf
