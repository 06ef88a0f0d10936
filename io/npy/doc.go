// Package npy reads 2-D NumPy arrays (.npy) as fields and writes fields as
// float64 arrays, on top of the npyio library. It accepts float32/64 and
// signed or unsigned integers of 1 to 8 bytes, either byte order, C or
// Fortran order; it refuses other shapes and dtypes (complex, object, bool)
// with an error that names them.
package npy
