#!/usr/bin/python3
"""Independent implementation of livefield's procedural noise, written from
the rules in the stimulus package documentation (SplitMix64 by random access,
binary, ternary and sparse noise), with Python integers and numpy.

Writes noise_golden.json: for each case its spec, frame indices (the first
frames, or a few far ones) and those frames, each
frame a flat list in row-major order (row r, column c at r*W + c).

Run from this directory: /usr/bin/python3 noise_golden.py
"""
import json

import numpy as np

MASK = (1 << 64) - 1


def out(seed, n):
    """Output number n (from 0) of SplitMix64 seeded with seed."""
    z = (seed + ((n + 1) & MASK) * 0x9E3779B97F4A7C15) & MASK
    z = ((z ^ (z >> 30)) * 0xBF58476D1CE4E5B9) & MASK
    z = ((z ^ (z >> 27)) * 0x94D049BB133111EB) & MASK
    return z ^ (z >> 31)


def uniform(x, m):
    """floor(x * m / 2**64)"""
    return (x * m) >> 64


def binary(spec, f):
    w, h, c = spec["width"], spec["height"], spec.get("contrast", 1.0)
    frame = np.empty((h, w))
    for r in range(h):
        for col in range(w):
            n = f * w * h + r * w + col
            frame[r, col] = c if out(spec["seed"], n) >> 63 else -c
    return frame


def ternary(spec, f):
    w, h, c = spec["width"], spec["height"], spec.get("contrast", 1.0)
    frame = np.empty((h, w))
    for r in range(h):
        for col in range(w):
            n = f * w * h + r * w + col
            k = uniform(out(spec["seed"], n), 3)
            frame[r, col] = (-c, 0.0, c)[k]
    return frame


def sparse(spec, f):
    w, h, c = spec["width"], spec["height"], spec.get("contrast", 1.0)
    k, s = spec.get("squares", 1), spec.get("size", 1)
    across, down = w // s, h // s
    m = across * down
    frame = np.zeros((h, w))
    for j in range(k):
        n = 2 * (f * k + j)
        cell = uniform(out(spec["seed"], n), m)
        v = c if out(spec["seed"], n + 1) >> 63 else -c
        i, jj = divmod(cell, across)
        frame[i * s:(i + 1) * s, jj * s:(jj + 1) * s] = v
    return frame


RULES = {"binary": binary, "ternary": ternary, "sparse": sparse}

CASES = [
    ("binary_8x6", {"type": "binary", "width": 8, "height": 6, "seed": 42, "contrast": 1.0}, 4),
    ("binary_5x3_big_seed", {"type": "binary", "width": 5, "height": 3, "seed": 18446744073709551557, "contrast": 0.25}, 3),
    ("ternary_7x5", {"type": "ternary", "width": 7, "height": 5, "seed": 7, "contrast": 0.5}, 4),
    ("sparse_12x8_s2_k3", {"type": "sparse", "width": 12, "height": 8, "seed": 9, "squares": 3, "size": 2, "contrast": 1.0}, 6),
    ("sparse_6x4_s1_k1", {"type": "sparse", "width": 6, "height": 4, "seed": 123456789, "contrast": 2.0}, 6),
    # far frame indices: f*W*H wraps modulo 2**64 for the last one
    ("binary_4x4_far", {"type": "binary", "width": 4, "height": 4, "seed": 5, "contrast": 1.0}, [1 << 40, (1 << 62) + 3]),
    ("ternary_3x3_far", {"type": "ternary", "width": 3, "height": 3, "seed": 5, "contrast": 1.0}, [123456789012]),
    ("sparse_4x4_far", {"type": "sparse", "width": 4, "height": 4, "seed": 5, "squares": 2, "size": 2, "contrast": 1.0}, [(1 << 62) + 1]),
]

golden = {
    "splitmix64_seed_1234567_first": [str(out(1234567, n)) for n in range(5)],
    "cases": [],
}
for name, spec, frames in CASES:
    rule = RULES[spec["type"]]
    indices = list(range(frames)) if isinstance(frames, int) else frames
    golden["cases"].append({
        "name": name,
        "spec": spec,
        "frame_indices": indices,
        "frames": [rule(spec, f).ravel().tolist() for f in indices],
    })

with open("noise_golden.json", "w") as fh:
    json.dump(golden, fh, indent=1)
    fh.write("\n")
