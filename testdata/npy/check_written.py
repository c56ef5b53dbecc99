#!/usr/bin/python3
"""Reads an NPY file written by livefield's Go writer with numpy.load and
prints its dtype descr, shape and C-order values as JSON on stdout, so the Go
test can compare them with what it wrote.

Usage: /usr/bin/python3 check_written.py FILE.npy
"""
import json
import sys

import numpy as np
from numpy.lib import format as npf

a = np.load(sys.argv[1], allow_pickle=False)
json.dump({"descr": npf.dtype_to_descr(a.dtype), "shape": list(a.shape),
           "values": [float(v) for v in a.ravel(order="C")]}, sys.stdout)
