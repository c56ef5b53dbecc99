"""Writes movie.npy, the short stimulus movie of the ingest tests.

Run with Debian's numpy: /usr/bin/python3 make_movie.py
The movie is 30 frames of 4x4 pixels, float64 in C order, shape
(frames, height, width): frame f, row r, column c holds f*100 + r*10 + c, so a
test can tell from the pixel values which frame a bin received.
movie.json records the shape and the sha256 of the file.
"""
import hashlib
import json

import numpy as np

f, r, c = np.meshgrid(np.arange(30), np.arange(4), np.arange(4), indexing="ij")
movie = (f * 100 + r * 10 + c).astype("<f8")
np.save("movie.npy", movie)
with open("movie.npy", "rb") as fh:
    digest = hashlib.sha256(fh.read()).hexdigest()
with open("movie.json", "w") as fh:
    json.dump({"file": "movie.npy", "shape": list(movie.shape), "sha256": digest}, fh, indent=1)
    fh.write("\n")
