"""Extracts a few handwritten digits for the exact-LP barycenter check.

Source: the optical recognition of handwritten digits data set (Alpaydin &
Kaynak, UCI Machine Learning Repository, 1998), as shipped by Debian's
python3-sklearn in sklearn/datasets/data/digits.csv.gz: 8 x 8 images with
intensities 0..16, the class in the last column. Writes the first three
images of class 3 and of class 7, one per line, 64 values row-major then
the class, to digits.csv.

    apt-get install -y python3-sklearn && /usr/bin/python3 make_digits.py
"""
import gzip
import os

import sklearn.datasets

path = os.path.join(os.path.dirname(sklearn.datasets.__file__), "data", "digits.csv.gz")
rows = [list(map(float, line.split(","))) for line in gzip.open(path, "rt")]
out = []
for cls in (3, 7):
    out += [r for r in rows if int(r[-1]) == cls][:3]
with open(os.path.join(os.path.dirname(__file__) or ".", "digits.csv"), "w") as f:
    f.write("# 8x8 handwritten digits (Alpaydin & Kaynak 1998, via Debian python3-sklearn); 64 values then the class\n")
    for r in out:
        f.write(",".join(str(int(v)) for v in r) + "\n")
