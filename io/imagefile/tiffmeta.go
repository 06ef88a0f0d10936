package imagefile

import (
	"barygrid/grid"
	"encoding/binary"
	"encoding/xml"
	"fmt"
	"math"
	"strings"
)

// Pixel-size sources, in the order of trust the reader follows.
const (
	SourceTIFFResolution = "tiff-resolution" // XResolution, YResolution, ResolutionUnit (TIFF 6.0)
	SourceOME            = "ome"             // OME-XML PhysicalSizeX/Y in ImageDescription
	SourceGeoTIFF        = "geotiff"         // ModelPixelScaleTag (OGC GeoTIFF 1.1)
)

// tiffTags are the values of the first IFD that carry a pixel size.
type tiffTags struct {
	xres, yres  float64 // pixels per unit, 0 when absent
	resUnit     int     // 1 none, 2 inch, 3 centimetre (default 2)
	description string
	pixelScale  []float64
}

// readTIFFTags reads the first IFD's resolution, description and GeoTIFF
// pixel-scale tags. Anything malformed is skipped: the pixel data's decoder
// reports broken files; here a missing value only means no pixel size.
func readTIFFTags(data []byte) tiffTags {
	t := tiffTags{resUnit: 2}
	bo := tiffOrder(data)
	if bo == nil {
		return t
	}
	off := int(bo.Uint32(data[4:]))
	if off < 8 || off+2 > len(data) {
		return t
	}
	n := int(bo.Uint16(data[off:]))
	size := map[uint16]int{1: 1, 2: 1, 3: 2, 4: 4, 5: 8, 7: 1, 12: 8}
	for i := 0; i < n; i++ {
		e := off + 2 + 12*i
		if e+12 > len(data) {
			break
		}
		tag, typ, count := bo.Uint16(data[e:]), bo.Uint16(data[e+2:]), int(bo.Uint32(data[e+4:]))
		sz, ok := size[typ]
		if !ok || count <= 0 || count > 1<<20 {
			continue
		}
		val := data[e+8 : e+12]
		if sz*count > 4 {
			p := int(bo.Uint32(val))
			if p < 0 || p+sz*count > len(data) {
				continue
			}
			val = data[p : p+sz*count]
		}
		rational := func() float64 {
			num, den := bo.Uint32(val), bo.Uint32(val[4:])
			if den == 0 {
				return 0
			}
			return float64(num) / float64(den)
		}
		switch {
		case tag == 282 && typ == 5:
			t.xres = rational()
		case tag == 283 && typ == 5:
			t.yres = rational()
		case tag == 296 && typ == 3:
			t.resUnit = int(bo.Uint16(val))
		case tag == 270 && typ == 2:
			t.description = strings.TrimRight(string(val), "\x00")
		case tag == 33550 && typ == 12:
			for j := 0; j < count; j++ {
				t.pixelScale = append(t.pixelScale, math.Float64frombits(bo.Uint64(val[8*j:])))
			}
		}
	}
	return t
}

// omeSize is the part of the OME-XML schema that holds the pixel size.
type omeSize struct {
	Images []struct {
		Pixels struct {
			X     float64 `xml:"PhysicalSizeX,attr"`
			Y     float64 `xml:"PhysicalSizeY,attr"`
			XUnit string  `xml:"PhysicalSizeXUnit,attr"`
		} `xml:"Pixels"`
	} `xml:"Image"`
}

// tiffPixelSize returns the pixel size a TIFF carries, its unit and where
// it came from: the baseline resolution tags (when their unit is a length),
// then OME-XML physical sizes, then the GeoTIFF pixel scale (map units,
// which the file names elsewhere: unit "" here). ok is false when none.
func tiffPixelSize(data []byte) (dx, dy float64, unit, source string, ok bool) {
	t := readTIFFTags(data)
	if t.xres > 0 && t.yres > 0 && (t.resUnit == 2 || t.resUnit == 3) {
		per := 25400.0 // micrometres per inch
		if t.resUnit == 3 {
			per = 10000
		}
		return per / t.xres, per / t.yres, "um", SourceTIFFResolution, true
	}
	if strings.Contains(t.description, "<OME") {
		var o omeSize
		if xml.Unmarshal([]byte(t.description), &o) == nil && len(o.Images) > 0 {
			p := o.Images[0].Pixels
			if p.X > 0 {
				y := p.Y
				if !(y > 0) {
					y = p.X
				}
				u := p.XUnit
				// TIFF ASCII cannot hold the micro sign: writers put "?" or a
				// Latin-1 byte there; OME's default unit is the micrometre.
				if u == "" || u == "µm" || u == "?m" || u == "\xb5m" || u == "\ufffdm" {
					u = "um"
				}
				return p.X, y, u, SourceOME, true
			}
		}
	}
	if len(t.pixelScale) >= 2 && t.pixelScale[0] > 0 && t.pixelScale[1] > 0 {
		return t.pixelScale[0], t.pixelScale[1], "", SourceGeoTIFF, true
	}
	return 0, 0, "", "", false
}

// lengthInCM returns how many centimetres one unit is ("" when not a length).
func lengthInCM(unit string) float64 {
	switch unit {
	case "nm":
		return 1e-7
	case "um", "µm":
		return 1e-4
	case "mm":
		return 0.1
	case "cm":
		return 1
	case "m":
		return 100
	case "km":
		return 1e5
	}
	return 0
}

// tiffOrder returns a TIFF's byte order from its header, nil when the
// header is not TIFF's.
func tiffOrder(data []byte) binary.ByteOrder {
	if len(data) < 8 {
		return nil
	}
	var bo binary.ByteOrder
	switch string(data[:2]) {
	case "II":
		bo = binary.LittleEndian
	case "MM":
		bo = binary.BigEndian
	default:
		return nil
	}
	if bo.Uint16(data[2:]) != 42 {
		return nil
	}
	return bo
}

// tiffPages returns the offsets of the IFDs of a TIFF, one per page, in
// order (at most limit; a loop in the chain ends it).
func tiffPages(data []byte, limit int) []uint32 {
	bo := tiffOrder(data)
	if bo == nil {
		return nil
	}
	var out []uint32
	seen := map[uint32]bool{}
	off := bo.Uint32(data[4:])
	for off >= 8 && int(off)+2 <= len(data) && !seen[off] && len(out) < limit {
		seen[off] = true
		out = append(out, off)
		n := int(bo.Uint16(data[off:]))
		next := int(off) + 2 + 12*n
		if next+4 > len(data) {
			break
		}
		off = bo.Uint32(data[next:])
	}
	return out
}

// TIFFPages returns the number of pages (images) of a TIFF: the planes of
// a z-stack or a time series.
func TIFFPages(data []byte) int { return len(tiffPages(data, 1<<16)) }

// ReadPage decodes page i (from 0) of a multi-page TIFF: the file's header
// is pointed at that page's directory, whose strip offsets are absolute,
// and read as a one-page file.
func ReadPage(data []byte, i int, s ReadSettings) (*grid.Field, error) {
	pages := tiffPages(data, i+1)
	if i < 0 || i >= len(pages) {
		return nil, fmt.Errorf("imagefile: the TIFF has %d pages, no page %d", len(pages), i)
	}
	if i == 0 {
		return Read(data, s)
	}
	c := append([]byte(nil), data...)
	tiffOrder(c).PutUint32(c[4:], pages[i])
	return Read(c, s)
}
