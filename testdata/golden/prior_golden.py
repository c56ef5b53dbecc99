#!/usr/bin/python3
"""Reference values for the smooth-local prior (online/prior_test.go).

A dense implementation written from the formulas, independent of the Go
code's factorisation:
- prior covariance C = s * E^1/2 K E^1/2 with the squared-exponential
  smoothness kernel K of automatic smoothness determination (Sahani & Linden
  2003, NIPS 15) and the Gaussian space-time envelope E of automatic locality
  determination (Park & Pillow 2011, PLoS Comput Biol 7(10): e1002219),
  built as full D x D matrices;
- log evidence of the linear-Gaussian model on centred data (flat intercept
  integrated out, n' = n - 1), computed twice: from the sufficient
  statistics with C^1/2 from numpy's eigh of the whole C (matrix determinant
  lemma and Woodbury), and by brute force as the Gaussian density of the
  centred responses projected on the orthogonal complement of the ones
  vector, y' ~ N(0, s2 I + Q'X C X'Q) (scipy.stats.multivariate_normal);
  the two must agree before anything is written;
- posterior mean mu = (G/s2 + C^-1)^-1 c/s2, written with C^1/2;
- the local maxima of the evidence, with s2 profiled out (s2 = (q - c'mu)/n'),
  over log a = log(s/s2), log lengths, centre and log widths, by scipy's
  L-BFGS-B from every point of the Go fitter's coarse grid, within the
  same bounds as the Go optimiser (the evidence is multimodal).
Run with /usr/bin/python3; it writes prior_golden.json beside itself.
"""
import json
import os

import numpy as np
import scipy
from scipy.optimize import minimize
from scipy.stats import multivariate_normal

W, H, L = 6, 5, 4          # frame columns, rows, lags
N_FRAMES = 2400


def lagged(frames, lags):
    n = frames.shape[0]
    return np.array([np.concatenate([frames[k - i] for i in range(lags)])
                     for k in range(lags - 1, n)])


def coords(win):
    x0, y0, t0, nx, ny, nt = win
    out = []
    for t in range(nt):
        for y in range(ny):
            for x in range(nx):
                out.append((x0 + x, y0 + y, t0 + t))
    return np.array(out, dtype=float)


def indices(win):
    return [int((t * H + y) * W + x) for x, y, t in coords(win)]


def prior_cov(h, chi):
    s, length, centre, width = h["scale"], h["length"], h["centre"], h["width"]
    diff = chi[:, None, :] - chi[None, :, :]
    k = np.exp(-0.5 * np.sum(diff ** 2 / np.array(length) ** 2, axis=2))
    env = np.exp(-0.5 * np.sum((chi - np.array(centre)) ** 2 / np.array(width) ** 2, axis=1))
    return s * np.sqrt(env)[:, None] * k * np.sqrt(env)[None, :]


def sqrtm_psd(c):
    vals, vecs = np.linalg.eigh(c)
    vals = np.clip(vals, 0, None)
    return (vecs * np.sqrt(vals)) @ vecs.T


def evidence(h, chi, g, c, q, n, profile=False):
    cov = prior_cov(h, chi)
    r = sqrtm_psd(cov)
    d = len(c)
    s2 = h["noise"]
    # mu = C^1/2 (s2 I + C^1/2 G C^1/2)^-1 C^1/2 c; log|I + C^1/2 G C^1/2 / s2|.
    m = r @ g @ r
    mu = r @ np.linalg.solve(s2 * np.eye(d) + m, r @ c)
    _, logdet = np.linalg.slogdet(np.eye(d) + m / s2)
    nn = n - 1
    res = q - c @ mu
    if profile:
        # mu depends on s/s2 only; here h["noise"] fixes that ratio.
        s2p = res / nn
        return -0.5 * nn * (np.log(2 * np.pi * s2p) + 1) - 0.5 * logdet, mu, s2p
    return -0.5 * nn * np.log(2 * np.pi * s2) - 0.5 * logdet - 0.5 * res / s2, mu, s2


def brute_evidence(h, chi, xw, y):
    """Density of the centred responses on the complement of the ones vector."""
    n = len(y)
    cov = prior_cov(h, chi)
    # Orthonormal basis of the complement of 1 (QR of [1 | I]).
    qfull, _ = np.linalg.qr(np.column_stack([np.ones(n), np.eye(n)[:, : n - 1]]))
    q = qfull[:, 1:]
    yp = q.T @ y
    xp = q.T @ xw
    sig = h["noise"] * np.eye(n - 1) + xp @ cov @ xp.T
    return multivariate_normal(mean=np.zeros(n - 1), cov=sig).logpdf(yp)


# Parameter vector of the optimiser: log a, log length (3), centre (3), log width (3).
LOG_LENGTH_BOUNDS = (np.log(0.25), np.log(64.0))
LOG_WIDTH_BOUNDS = (np.log(0.25), np.log(64.0))
LOG_A_BOUNDS = (-60.0, 60.0)


def to_hyper(theta):
    a = np.exp(theta[0])
    return {"scale": a, "noise": 1.0, "length": list(np.exp(theta[1:4])),
            "centre": list(theta[4:7]), "width": list(np.exp(theta[7:10]))}


def bounds(win):
    x0, y0, t0, nx, ny, nt = win
    cb = [(x0 - 2.0, x0 + nx + 1.0), (y0 - 2.0, y0 + ny + 1.0), (t0 - 2.0, t0 + nt + 1.0)]
    return [LOG_A_BOUNDS] + [LOG_LENGTH_BOUNDS] * 3 + cb + [LOG_WIDTH_BOUNDS] * 3


def main():
    rng = np.random.default_rng(20030)
    frames = rng.choice([-1.0, 1.0], size=(N_FRAMES, H * W))
    x = lagged(frames, L)
    n = x.shape[0]
    # A smooth, local, space-time oriented filter.
    chi = coords((0, 0, 0, W, H, L))
    env = np.exp(-0.5 * ((chi[:, 0] - 2.6) ** 2 / 1.4 ** 2 + (chi[:, 1] - 2.2) ** 2 / 1.2 ** 2
                         + (chi[:, 2] - 1.3) ** 2 / 1.0 ** 2))
    w = env * np.cos(2 * np.pi * (chi[:, 0] - 2.6 + 0.5 * chi[:, 2]) / 7.0)
    w *= 0.5 / np.linalg.norm(w)
    y = rng.poisson(np.exp(-1.2 + x @ w)).astype(float)

    xc = x - x.mean(axis=0)
    yc = y - y.mean()

    cases = []
    fixed = [
        ("whole", (0, 0, 0, W, H, L),
         {"scale": 0.004, "noise": 0.35, "length": [1.3, 0.9, 1.1], "centre": [2.5, 2.0, 1.5], "width": [1.8, 1.6, 1.4]}),
        ("window", (1, 1, 1, 4, 3, 2),
         {"scale": 0.01, "noise": 0.3, "length": [0.7, 2.0, 0.6], "centre": [2.0, 3.5, 1.0], "width": [3.0, 0.8, 2.5]}),
        ("narrow", (0, 0, 0, W, H, L),
         {"scale": 0.02, "noise": 0.4, "length": [0.3, 0.3, 0.3], "centre": [5.5, -0.5, 3.0], "width": [0.4, 0.6, 0.5]}),
    ]
    for name, win, h in fixed:
        idx = indices(win)
        chiw = coords(win)
        xw = xc[:, idx]
        g = xw.T @ xw
        c = xw.T @ yc
        q = float(yc @ yc)
        ev, mu, _ = evidence(h, chiw, g, c, q, n)
        brute = brute_evidence(h, chiw, x[:, idx], y)
        assert abs(ev - brute) < 1e-9 * abs(ev), (name, ev, brute)
        prof, _, s2p = evidence(h, chiw, g, c, q, n, profile=True)
        cases.append({"name": name, "window": list(win), "hyper": h,
                      "log_evidence": float(ev), "log_evidence_brute": float(brute),
                      "profile_log_evidence": float(prof), "profile_noise": float(s2p),
                      "mean": [float(v) for v in mu]})

    # The optimum over the whole frame, from a fixed start.
    win = (0, 0, 0, W, H, L)
    idx = indices(win)
    chiw = coords(win)
    xw = xc[:, idx]
    g, c, q = xw.T @ xw, xw.T @ yc, float(yc @ yc)
    start = np.array([np.log(0.01), np.log(1.0), np.log(1.0), np.log(1.0), 2.5, 2.0, 1.5,
                      np.log(2.0), np.log(2.0), np.log(2.0)])

    def neg(theta):
        return -evidence(to_hyper(theta), chiw, g, c, q, n, profile=True)[0]

    # The evidence of these priors has several local maxima. Starts: every
    # point of the Go fitter's coarse grid (online/prior_window.go), the
    # envelope centred on the given centre, temporal length 1 lag and width
    # 1.5 lags: first a at six decades around D/tr(G) with lengths 1.5 px
    # and widths 2 px in x and y, then at the best of those a, lengths
    # {1, 2.5} px times widths {1.5, 3} px. Each distinct local maximum
    # reached by L-BFGS-B is recorded, best first; the one reached from the
    # grid's best point is marked from_start.
    bnd = bounds(win)
    a0 = len(c) / np.trace(g)

    def point(a, length, width):
        return np.array([np.log(a), np.log(length), np.log(length), 0.0,
                         *start[4:7], np.log(width), np.log(width), np.log(1.5)])

    grid = [point(a0 * 10.0 ** e, 1.5, 2.0) for e in range(-2, 4)]
    a_best = np.exp(max(grid, key=lambda th: -neg(th))[0])
    grid += [point(a_best, length, width) for length in (1.0, 2.5) for width in (1.5, 3.0)]
    best_start = max(range(len(grid)), key=lambda i: -neg(grid[i]))
    starts = [grid[best_start]] + [th for i, th in enumerate(grid) if i != best_start]
    optima = []
    for i, s0 in enumerate(starts):
        res = minimize(neg, s0, method="L-BFGS-B", bounds=bnd,
                       options={"ftol": 1e-15, "gtol": 1e-9, "maxiter": 5000, "maxfun": 50000})
        hopt = to_hyper(res.x)
        ev, mu, s2 = evidence(hopt, chiw, g, c, q, n, profile=True)
        if not any(abs(ev - o["log_evidence"]) < 1e-3 for o in optima):
            optima.append({"from_start": i == 0, "theta": [float(v) for v in res.x],
                           "log_evidence": float(ev), "noise": float(s2),
                           "scale": float(np.exp(res.x[0]) * s2), "mean": [float(v) for v in mu]})
        elif i == 0:
            for o in optima:
                if abs(ev - o["log_evidence"]) < 1e-3:
                    o["from_start"] = True
    optima.sort(key=lambda o: -o["log_evidence"])
    optimum = {"window": list(win), "start": [float(v) for v in start], "optima": optima}

    out = {
        "source": "dense numpy/scipy implementation of the smooth-local prior's evidence "
                  "(Sahani & Linden 2003; Park & Pillow 2011), testdata/golden/prior_golden.py",
        "versions": {"numpy": np.__version__, "scipy": scipy.__version__},
        "width": W, "height": H, "lags": L,
        "frames": frames.tolist(), "counts": y.tolist(),
        "fixed": cases, "optimum": optimum,
    }
    path = os.path.join(os.path.dirname(os.path.abspath(__file__)), "prior_golden.json")
    with open(path, "w") as f:
        json.dump(out, f, indent=0)
        f.write("\n")


if __name__ == "__main__":
    main()
