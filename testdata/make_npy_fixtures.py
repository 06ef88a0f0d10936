# Makes the tiny NumPy fixtures read by io/npy tests (run with Debian's python3-numpy):
#   /usr/bin/python3 testdata/make_npy_fixtures.py
import numpy as np, os
d = os.path.dirname(os.path.abspath(__file__))
a = np.arange(6, dtype=np.float64).reshape(2, 3) * 1.5
np.save(os.path.join(d, "f8_c.npy"), a)
np.save(os.path.join(d, "f4_fortran.npy"), np.asfortranarray(a.astype(np.float32)))
np.save(os.path.join(d, "u2_c.npy"), (np.arange(6).reshape(2, 3) * 10000).astype(np.uint16))
np.save(os.path.join(d, "i4_be.npy"), np.arange(6).reshape(2, 3).astype(">i4"))
np.save(os.path.join(d, "u1_c.npy"), np.arange(6).reshape(2, 3).astype(np.uint8))
np.save(os.path.join(d, "i8_c.npy"), np.arange(6).reshape(2, 3).astype(np.int64))
np.save(os.path.join(d, "bad_3d.npy"), np.zeros((2, 2, 2)))
np.save(os.path.join(d, "bad_complex.npy"), np.zeros((2, 3), dtype=np.complex128))
