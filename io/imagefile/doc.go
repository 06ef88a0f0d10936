// Package imagefile reads raster images (PNG, JPEG, TIFF, BMP) as intensity
// fields and writes fields as 16- or 8-bit grayscale PNG, 16-bit TIFF and
// colour-mapped PNG.
//
// Intensities keep the image's own scale: 0..255 for 8-bit samples,
// 0..65535 for 16-bit ones. Colour pixels become luminance with the ITU-R
// BT.709 weights (0.2126 R + 0.7152 G + 0.0722 B) on the stored values;
// alpha multiplies the intensity, so transparent pixels carry no mass.
package imagefile
