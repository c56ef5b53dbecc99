#!/usr/bin/python3
"""Writes the small movie files used by stream/stimulus tests with numpy.save,
and movies.json with each file's SHA-256 and its frames as livefield must
deliver them (uint8 v mapped to v/127.5 - 1, floats as stored), computed here
with numpy.

Run from this directory: /usr/bin/python3 make_movies.py
"""
import hashlib
import json

import numpy as np

rng = np.random.default_rng(2024)
movies = {
    "movie_u8.npy": rng.integers(0, 256, size=(3, 2, 4), dtype=np.uint8),
    "movie_f4.npy": rng.standard_normal((2, 3, 2)).astype("<f4"),
    "movie_f8.npy": rng.standard_normal((4, 2, 2)).astype("<f8"),
}
movies["movie_u8.npy"][0, 0, :2] = [0, 255]  # the ends of the uint8 range

bad = {
    "bad_i2.npy": np.zeros((2, 2, 2), dtype="<i2"),
    "bad_2d.npy": np.zeros((4, 4), dtype="<f8"),
    "bad_big.npy": np.zeros((1, 2, 2), dtype=">f8"),
    "bad_fortran.npy": np.asfortranarray(np.zeros((2, 2, 3), dtype="<f8")),
}

out = {}
for name, a in {**movies, **bad}.items():
    np.save(name, a)
    with open(name, "rb") as f:
        digest = hashlib.sha256(f.read()).hexdigest()
    entry = {"sha256": digest}
    if name in movies:
        frames = a.astype(np.float64)
        if a.dtype == np.uint8:
            frames = frames / 127.5 - 1
        entry["shape"] = list(a.shape)
        entry["frames"] = [fr.ravel().tolist() for fr in frames]
    out[name] = entry

with open("movies.json", "w") as f:
    json.dump(out, f, indent=1, sort_keys=True)
    f.write("\n")
