// Package csvgrid reads and writes numeric grids as delimited text: one grid
// row per line, values separated by commas, tabs, semicolons or runs of
// spaces (detected from the first data line). A first line made only of
// non-numeric labels is taken as a header and skipped. Ragged rows,
// non-numbers, NaN and Inf are errors that name the line and column.
package csvgrid
