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
