#!/usr/bin/python3
"""Reference values for online/ridge_test.go.

Run with Debian's interpreter (numpy, scipy and scikit-learn from the Debian
packages):  /usr/bin/python3 testdata/golden/ridge_golden.py
It writes testdata/golden/ridge_golden.json next to this script.

Two synthetic stimuli, each a movie of W×H frames lagged by L frames
(x_k = [s_k; s_{k-1}; ...; s_{k-L+1}], rows k = L-1 ... L-1+N-1):
  white:      independent ±1 pixels (binary white noise)
  correlated: Gaussian noise smoothed in space (scipy.ndimage.gaussian_filter)
              and in time (first-order autoregression), rounded to 4 decimals
              so that the JSON holds the exact values used.
Responses: 4 units of Poisson counts from a linear-nonlinear model (Gaussian
blob filters with a biphasic time course, exponential nonlinearity).

For each case and each checkpoint n, scikit-learn's
sklearn.linear_model.Ridge(alpha=lam, fit_intercept=True) is fitted on the
first n rows. Alongside coef_ and intercept_ the file holds, computed with
numpy from the same data:
  objective:  sum_k (y_k - b - x_k.w)^2 + lam ||w||^2 per unit
  post_diag:  diag of the weights block of inv(diag(lam,...,lam,0) + A^T A),
              A = [X 1] (numpy.linalg.inv)
  t1, t2:     sum h_i and sum h_i^2 with h_i = g_i / (g_i + lam), g_i the
              eigenvalues of the centred Gram matrix (numpy.linalg.eigvalsh)
"""
import json
import os

import numpy as np
import scipy.ndimage
import sklearn
from sklearn.linear_model import Ridge

W, H, L, N = 6, 6, 5, 600
P = W * H
D = P * L
CHECKPOINTS = [50, 120, 300, 600]


def lagged(frames):
    # frames: (N+L-1) x P; row k of the result is [s_k, s_{k-1}, ..., s_{k-L+1}]
    rows = []
    for k in range(L - 1, L - 1 + N):
        rows.append(np.concatenate([frames[k - l] for l in range(L)]))
    return np.array(rows)


def units(rng):
    yy, xx = np.mgrid[0:H, 0:W]
    t = np.arange(L)
    course = np.exp(-t / 1.5) * np.sin(np.pi * (t + 0.5) / 3.0)
    filters = []
    for cx, cy, s, sign in [(1.5, 2.0, 1.0, 1), (4.0, 3.5, 1.3, -1), (2.5, 4.0, 0.8, 1), (3.0, 1.0, 1.6, -1)]:
        blob = sign * np.exp(-((xx - cx) ** 2 + (yy - cy) ** 2) / (2 * s * s)).ravel()
        filters.append(np.concatenate([c * blob for c in course]))
    return np.array(filters)  # 4 x D


def responses(rng, X, filters, gain):
    drive = X @ filters.T
    drive /= drive.std(axis=0)
    rate = np.exp(-1.0 + gain * drive)
    return rng.poisson(rate).astype(float)


def reference(X, Y, lam, n):
    Xn, Yn = X[:n], Y[:n]
    w = np.ones(n)
    alpha = lam
    model = Ridge(alpha=alpha, fit_intercept=True)
    model.fit(Xn, Yn)
    coef, icpt = model.coef_, model.intercept_
    # Direct check of scikit-learn against the normal equations of [X 1].
    A = np.hstack([Xn, np.ones((n, 1))])
    Lam = np.diag(np.r_[np.full(D, alpha), 0.0])
    M = Lam + A.T @ (w[:, None] * A)
    Minv = np.linalg.inv(M)
    direct = Minv @ (A.T @ (w[:, None] * Yn))
    assert np.allclose(direct[:D].T, coef, rtol=1e-9, atol=1e-11), "sklearn and normal equations disagree"
    assert np.allclose(direct[D], icpt, rtol=1e-9, atol=1e-11)
    res = Yn - Xn @ coef.T - icpt
    objective = (w[:, None] * res ** 2).sum(axis=0) + alpha * (coef ** 2).sum(axis=1)
    mean = (w @ Xn) / w.sum()
    Xc = Xn - mean
    g = np.linalg.eigvalsh(Xc.T @ (w[:, None] * Xc))
    h = g / (g + alpha)
    return {
        "n": n,
        "coef": coef.tolist(),
        "intercept": icpt.tolist(),
        "objective": objective.tolist(),
        "post_diag": np.diag(Minv)[:D].tolist(),
        "t1": float(h.sum()),
        "t2": float((h ** 2).sum()),
    }


def main():
    rng = np.random.default_rng(20240611)
    filters = units(rng)
    white = rng.choice([-1.0, 1.0], size=(N + L - 1, P))
    raw = rng.standard_normal((N + L - 1, H, W))
    smooth = scipy.ndimage.gaussian_filter(raw, sigma=(0, 1.0, 1.0), mode="wrap")
    corr = np.empty_like(smooth)
    corr[0] = smooth[0]
    for k in range(1, len(smooth)):
        corr[k] = 0.7 * corr[k - 1] + smooth[k]
    corr = np.round(corr.reshape(N + L - 1, P) / corr.std(), 4)

    stimuli = {"white": white, "correlated": corr}
    data = {}
    for name, frames in stimuli.items():
        X = lagged(frames)
        Y = responses(rng, X, filters, 0.8)
        data[name] = (frames, X, Y)

    cases = []
    for name, lam in [("white", 4.0), ("white", 40.0), ("correlated", 15.0)]:
        frames, X, Y = data[name]
        cases.append({
            "stimulus": name,
            "lambda": lam,
            "checkpoints": [reference(X, Y, lam, n) for n in CHECKPOINTS],
        })

    out = {
        "source": "sklearn.linear_model.Ridge(fit_intercept=True), scikit-learn %s, numpy %s" % (sklearn.__version__, np.__version__),
        "width": W, "height": H, "lags": L, "rows": N,
        "stimuli": {name: {"frames": d[0].tolist(), "y": d[2].tolist()} for name, d in data.items()},
        "cases": cases,
    }
    path = os.path.join(os.path.dirname(os.path.abspath(__file__)), "ridge_golden.json")
    with open(path, "w") as f:
        json.dump(out, f)
        f.write("\n")


if __name__ == "__main__":
    main()
