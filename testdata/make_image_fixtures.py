"""Writes small image fixtures with Python's imaging library (Debian's
python3-pil), an encoder independent of Go's, for the readers' tests.

Each holds the ramp v[r][c] = 37*r + 11*c on a 4 x 5 grid (8-bit: as is;
16-bit: times 257), so that a reader's values can be checked exactly.

    apt-get install -y python3-pil && /usr/bin/python3 make_image_fixtures.py
"""
import os

from PIL import Image

here = os.path.dirname(__file__) or "."
rows, cols = 4, 5
ramp = [[37 * r + 11 * c for c in range(cols)] for r in range(rows)]

g8 = Image.new("L", (cols, rows))
g8.putdata([v for row in ramp for v in row])
g8.save(os.path.join(here, "pil_gray8.png"))
g8.save(os.path.join(here, "pil_gray8.tif"))

g16 = Image.new("I;16", (cols, rows))
g16.putdata([257 * v for row in ramp for v in row])
g16.save(os.path.join(here, "pil_gray16.png"))
g16.save(os.path.join(here, "pil_gray16.tif"))

# Pixel size in the file (TIFF 6.0 resolution tags, OME-XML, GeoTIFF), each
# read back by barygrid with its source: 8-bit ramp as above.
from PIL import TiffImagePlugin

# 2540 dpi: 10 um pixels.
g8.save(os.path.join(here, "pil_res_inch.tif"), dpi=(2540, 5080))

# 2000 pixels per cm: 5 um along x, 4000 per cm along y: 2.5 um.
ifd = TiffImagePlugin.ImageFileDirectory_v2()
ifd[296] = 3
ifd[282] = 2000.0
ifd[283] = 4000.0
g8.save(os.path.join(here, "pil_res_cm.tif"), tiffinfo=ifd)

# OME-XML (open OME schema): 0.65 x 0.8 um, no resolution tags.
ome = ('<?xml version="1.0" encoding="UTF-8"?>'
       '<OME xmlns="http://www.openmicroscopy.org/Schemas/OME/2016-06">'
       '<Image ID="Image:0"><Pixels ID="Pixels:0" DimensionOrder="XYZCT" Type="uint8" '
       'SizeX="5" SizeY="4" SizeZ="1" SizeC="1" SizeT="1" '
       'PhysicalSizeX="0.65" PhysicalSizeY="0.8" PhysicalSizeXUnit="µm" PhysicalSizeYUnit="µm"/>'
       '</Image></OME>')
ifd = TiffImagePlugin.ImageFileDirectory_v2()
ifd[270] = ome
g8.save(os.path.join(here, "pil_ome.tif"), tiffinfo=ifd)

# GeoTIFF ModelPixelScaleTag (OGC GeoTIFF 1.1): 250 x 500 map units.
ifd = TiffImagePlugin.ImageFileDirectory_v2()
ifd[33550] = (250.0, 500.0, 0.0)
ifd.tagtype[33550] = 12
g8.save(os.path.join(here, "pil_geotiff.tif"), tiffinfo=ifd)

# A 3-page 8-bit stack (z-stack planes): page k holds the ramp plus 50 k.
pages = []
for k in range(3):
    p = Image.new("L", (cols, rows))
    p.putdata([v + 50 * k for row in ramp for v in row])
    pages.append(p)
pages[0].save(os.path.join(here, "pil_stack.tif"), save_all=True, append_images=pages[1:])
