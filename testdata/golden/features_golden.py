#!/usr/bin/python3
"""Reference values for the separability part of online.FeaturesOf
(online/features_test.go).

For each synthetic estimate (lag-major [lag][row][col]) it reshapes to the
pixels x lags matrix M, takes numpy.linalg.svd (Debian's python3-numpy) and
records the singular values, the index s1^2 / sum s_i^2, the rank-1
approximation s1 u1 v1^T, and the spatial (s1 u1) and temporal (v1)
profiles with the sign rule: the spatial profile's largest-magnitude pixel
has the sign of the peak-lag map's largest-magnitude pixel.
Run with /usr/bin/python3; it writes features_golden.json beside itself.
"""
import json
import os

import numpy as np


def separable(rng, w, h, lags):
    yy, xx = np.mgrid[0:h, 0:w]
    space = -np.exp(-((xx - 2.2) ** 2 + (yy - 1.4) ** 2) / 2.0)
    t = np.arange(lags)
    time = np.exp(-t / 2.0) * np.sin(t / 1.5 + 0.3)
    est = time[:, None, None] * space[None, :, :]
    return est + 0.05 * rng.normal(size=est.shape)


def oriented(rng, w, h, lags):
    yy, xx = np.mgrid[0:h, 0:w]
    est = np.array([np.cos(2 * np.pi * (xx / 4.0 - l / 5.0)) * np.exp(-((xx - 3.5) ** 2) / 8.0)
                    * np.exp(-((yy - 1.5) ** 2) / 4.0) for l in range(lags)])
    return est + 0.01 * rng.normal(size=est.shape)


def case(name, est):
    lags, h, w = est.shape
    p = w * h
    m = est.reshape(lags, p).T  # pixels x lags
    u, s, vt = np.linalg.svd(m, full_matrices=False)
    energy = (est.reshape(lags, p) ** 2).sum(axis=1)
    peak = int(np.argmax(energy))
    pmap = est[peak].ravel()
    polarity = int(np.sign(pmap[np.argmax(np.abs(pmap))]))
    spatial = s[0] * u[:, 0]
    temporal = vt[0]
    if np.sign(spatial[np.argmax(np.abs(spatial))]) != polarity:
        spatial, temporal = -spatial, -temporal
    return {
        "name": name, "width": w, "height": h, "lags": lags,
        "est": est.ravel().tolist(),
        "singular_values": s.tolist(),
        "separability": float(s[0] ** 2 / (s ** 2).sum()),
        "rank1": np.outer(s[0] * u[:, 0], vt[0]).ravel().tolist(),  # pixels x lags, row-major
        "peak_lag": peak,
        "polarity": polarity,
        "spatial": spatial.tolist(),
        "temporal": temporal.tolist(),
    }


def main():
    rng = np.random.default_rng(1985)
    out = {
        "source": "numpy %s linalg.svd" % np.__version__,
        "cases": [
            case("separable plus noise", separable(rng, 5, 4, 6)),
            case("space-time oriented", oriented(rng, 8, 3, 7)),
            case("random", rng.normal(size=(4, 3, 3))),
            case("more lags than pixels", rng.normal(size=(5, 1, 2))),
        ],
    }
    path = os.path.join(os.path.dirname(os.path.abspath(__file__)), "features_golden.json")
    with open(path, "w") as f:
        json.dump(out, f)


if __name__ == "__main__":
    main()
