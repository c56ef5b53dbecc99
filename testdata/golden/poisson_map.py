#!/usr/bin/python3
"""Reference values for the Poisson refinement (online/poisson_map_test.go).

Written from the formulas, with dense matrices and without the Go code's
factor of the prior:
- the log posterior of the linear-nonlinear-Poisson model with exponential
  nonlinearity under a Gaussian prior w ~ N(0, C) and a flat intercept b,
      L(b, w) = sum_t [y_t eta_t - exp(eta_t) - log y_t!] - 1/2 w' C^-1 w,
      eta_t = b + x_t' w,
  with log y! from scipy.special.gammaln and C^-1 w by numpy.linalg.solve;
- its maximum, found by scipy.optimize.minimize(method="Newton-CG") with
  the analytic gradient and Hessian in (b, w), xtol 1e-12 (trust-exact
  stopped at a gradient norm of 6e-7 with "a bad approximation caused
  failure to predict improvement"); the gradient norm at the optimum is
  written too and must be below 1e-8;
- the smooth-local prior covariance C = s E^1/2 K E^1/2 of a small window
  (squared-exponential kernel of Sahani & Linden 2003 times the Gaussian
  envelope of Park & Pillow 2011), built entry by entry, for the Go factor
  R with R R' = C;
- one unit's whole refinement from frames and counts: the lagged design of
  its window and the MAP under that covariance divided by the squared mean
  count, by the same minimiser.
Run with /usr/bin/python3; it writes poisson_map.json beside itself.
"""
import json
import os

import numpy as np
from scipy.optimize import minimize
from scipy.special import gammaln

rng = np.random.default_rng(20261203)

# A small data set: T bins of D = 6 ternary stimulus values.
T, D = 400, 6
X = rng.integers(-1, 2, size=(T, D)).astype(float)
w_true = np.array([0.4, -0.3, 0.2, 0.0, 0.1, -0.2])
y = rng.poisson(np.exp(-0.7 + X @ w_true)).astype(float)

# A fixed prior covariance: squared-exponential in the index, scaled.
idx = np.arange(D, dtype=float)
C = 0.5 * np.exp(-0.5 * (idx[:, None] - idx[None, :]) ** 2 / 1.5 ** 2) + 0.05 * np.eye(D)


def log_posterior(b, w):
    eta = b + X @ w
    return float(np.sum(y * eta - np.exp(eta) - gammaln(y + 1)) - 0.5 * w @ np.linalg.solve(C, w))


def neg(theta):
    return -log_posterior(theta[0], theta[1:])


def neg_grad(theta):
    b, w = theta[0], theta[1:]
    lam = np.exp(b + X @ w)
    g = np.concatenate([[np.sum(y - lam)], X.T @ (y - lam) - np.linalg.solve(C, w)])
    return -g


def neg_hess(theta):
    b, w = theta[0], theta[1:]
    lam = np.exp(b + X @ w)
    Z = np.hstack([np.ones((T, 1)), X])
    A = Z.T @ (lam[:, None] * Z)
    A[1:, 1:] += np.linalg.inv(C)
    return A


b_fixed, w_fixed = -0.5, np.array([0.3, -0.1, 0.2, 0.05, 0.0, -0.15])
start = np.zeros(D + 1)
start[0] = np.log(y.mean())
opt = minimize(neg, start, jac=neg_grad, hess=neg_hess, method="Newton-CG",
               options={"xtol": 1e-12})
assert opt.success, opt.message
assert np.linalg.norm(neg_grad(opt.x)) < 1e-8

# The smooth-local covariance of a 3 x 2 x 2 window at (1, 2, 3).
win = {"x0": 1, "y0": 2, "t0": 3, "nx": 3, "ny": 2, "nt": 2}
hyper = {"scale": 0.7, "noise": 1.0, "length": [1.3, 0.9, 1.1],
         "centre": [2.2, 2.5, 3.4], "width": [1.7, 1.2, 0.8]}
chi = np.array([(win["x0"] + x, win["y0"] + yy, win["t0"] + t)
                for t in range(win["nt"]) for yy in range(win["ny"]) for x in range(win["nx"])], dtype=float)
diff = chi[:, None, :] - chi[None, :, :]
K = np.exp(-0.5 * np.sum(diff ** 2 / np.array(hyper["length"]) ** 2, axis=2))
E = np.exp(-0.5 * np.sum((chi - np.array(hyper["centre"])) ** 2 / np.array(hyper["width"]) ** 2, axis=1))
C_win = hyper["scale"] * np.sqrt(E)[:, None] * K * np.sqrt(E)[None, :]

# The whole refinement of one unit (online.BinStore.PoissonMAP): frames of
# 4 x 3 ternary pixels, 3 lags, counts of an exp-LNP cell; the prior is the
# smooth-local covariance of the window scaled by 1/ybar^2 (the Go code's
# translation of the linear model's scale to log-rate units), the design the
# window's pixels at the window's lags, lag-major (lag, row, column).
FW, FH, FL, NFR = 4, 3, 3, 600
frames = rng.integers(-1, 2, size=(NFR, FH * FW)).astype(float)
full_w = np.zeros(FL * FH * FW)
full_w[1 * FH * FW + 1 * FW + 1] = 0.5
full_w[1 * FH * FW + 1 * FW + 2] = 0.3
full_w[2 * FH * FW + 1 * FW + 1] = -0.2
lagged_full = np.array([np.concatenate([frames[k - l] for l in range(FL)]) for k in range(FL - 1, NFR)])
counts = rng.poisson(np.exp(-1.2 + lagged_full @ full_w)).astype(float)
uwin = {"x0": 1, "y0": 0, "t0": 0, "nx": 2, "ny": 3, "nt": 2}
uhyper = {"scale": 0.02, "noise": 0.4, "length": [1.0, 1.2, 0.8],
          "centre": [1.5, 1.2, 1.0], "width": [1.5, 1.5, 1.2]}
uidx = [((uwin["t0"] + t) * FH + uwin["y0"] + yy) * FW + uwin["x0"] + x
        for t in range(uwin["nt"]) for yy in range(uwin["ny"]) for x in range(uwin["nx"])]
uchi = np.array([(uwin["x0"] + x, uwin["y0"] + yy, uwin["t0"] + t)
                 for t in range(uwin["nt"]) for yy in range(uwin["ny"]) for x in range(uwin["nx"])], dtype=float)
ud = uchi[:, None, :] - uchi[None, :, :]
uK = np.exp(-0.5 * np.sum(ud ** 2 / np.array(uhyper["length"]) ** 2, axis=2))
uE = np.exp(-0.5 * np.sum((uchi - np.array(uhyper["centre"])) ** 2 / np.array(uhyper["width"]) ** 2, axis=1))
ybar = counts.mean()
uC = uhyper["scale"] * np.sqrt(uE)[:, None] * uK * np.sqrt(uE)[None, :] / ybar ** 2
uX = lagged_full[:, uidx]
uCi = np.linalg.inv(uC)


def u_neg(theta):
    eta = theta[0] + uX @ theta[1:]
    return -(np.sum(counts * eta - np.exp(eta) - gammaln(counts + 1)) - 0.5 * theta[1:] @ uCi @ theta[1:])


def u_grad(theta):
    lam = np.exp(theta[0] + uX @ theta[1:])
    return -np.concatenate([[np.sum(counts - lam)], uX.T @ (counts - lam) - uCi @ theta[1:]])


def u_hess(theta):
    lam = np.exp(theta[0] + uX @ theta[1:])
    Z = np.hstack([np.ones((len(counts), 1)), uX])
    A = Z.T @ (lam[:, None] * Z)
    A[1:, 1:] += uCi
    return A


ustart = np.zeros(len(uidx) + 1)
ustart[0] = np.log(ybar)
uopt = minimize(u_neg, ustart, jac=u_grad, hess=u_hess, method="Newton-CG", options={"xtol": 1e-12})
assert uopt.success, uopt.message
assert np.linalg.norm(u_grad(uopt.x)) < 1e-8

out = {
    "x": X.tolist(), "y": y.tolist(), "c": C.tolist(),
    "b_fixed": b_fixed, "w_fixed": w_fixed.tolist(),
    "log_posterior_fixed": log_posterior(b_fixed, w_fixed),
    "map_b": float(opt.x[0]), "map_w": opt.x[1:].tolist(),
    "map_log_posterior": -float(opt.fun),
    "map_grad_norm": float(np.linalg.norm(neg_grad(opt.x))),
    "window": win, "hyper": hyper, "window_cov": C_win.tolist(),
    "unit": {
        "width": FW, "height": FH, "lags": FL, "frames": frames.tolist(), "counts": counts.tolist(),
        "window": uwin, "hyper": uhyper, "indices": uidx,
        "map_b": float(uopt.x[0]), "map_w": uopt.x[1:].tolist(), "map_log_posterior": -float(uopt.fun),
        "map_grad_norm": float(np.linalg.norm(u_grad(uopt.x))),
        "min_eigenvalue": float(np.linalg.eigvalsh(u_hess(uopt.x)).min()),
    },
}
with open(os.path.join(os.path.dirname(os.path.abspath(__file__)), "poisson_map.json"), "w") as f:
    json.dump(out, f, indent=1)
    f.write("\n")
print("MAP", opt.x, "L", -opt.fun, "iterations", opt.nit, "|grad|", out["map_grad_norm"])
print("unit MAP b", uopt.x[0], "L", -uopt.fun, "|grad|", out["unit"]["map_grad_norm"], "min eig", out["unit"]["min_eigenvalue"])
