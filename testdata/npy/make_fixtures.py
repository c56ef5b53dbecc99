#!/usr/bin/python3
"""Writes the NPY fixtures read by stream/npy tests, with numpy's own writer
(numpy.save and numpy.lib.format.write_array), and fixtures.json listing each
file's shape, dtype and values as numpy reads them back.

Run from this directory with Debian's python3: /usr/bin/python3 make_fixtures.py
"""
import json

import numpy as np
from numpy.lib import format as npf

fixtures = {}


def save(name, arr, version=None):
    with open(name, "wb") as f:
        if version is None:
            np.save(f, arr)
        else:
            npf.write_array(f, arr, version=version)
    back = np.load(name)
    fixtures[name] = {
        "shape": list(back.shape),
        "descr": npf.dtype_to_descr(back.dtype),
        "fortran": bool(np.isfortran(back)) if back.ndim > 1 else False,
        # values in file order (C order unless fortran)
        "values": [float(v) for v in back.ravel(order="F" if np.isfortran(back) and back.ndim > 1 else "C")],
    }


save("f8_2x3.npy", np.array([[0.5, -1.25, 3.0], [1e-300, -0.0, 2.5e10]], dtype="<f8"))
save("f4_4.npy", np.array([1.5, -2.25, 0.1, 3.4e38], dtype="<f4"))
save("u1_2x2x3.npy", np.arange(0, 256, 22, dtype=np.uint8).reshape(2, 2, 3))
save("i4_3.npy", np.array([-7, 0, 2147483647], dtype="<i4"))
save("f8_v2.npy", np.array([[1.0, 2.0], [3.0, 4.0]], dtype="<f8"), version=(2, 0))
save("f8_v3.npy", np.array([9.0, -9.0], dtype="<f8"), version=(3, 0))
save("f8_big.npy", np.array([1.0, -2.0, 0.75], dtype=">f8"))
save("f8_fortran.npy", np.asfortranarray(np.array([[1.0, 2.0, 3.0], [4.0, 5.0, 6.0]])))
save("f8_scalar.npy", np.array(42.5, dtype="<f8"))
save("f8_empty.npy", np.zeros((0, 3), dtype="<f8"))

with open("fixtures.json", "w") as f:
    json.dump(fixtures, f, indent=1, sort_keys=True)
    f.write("\n")
