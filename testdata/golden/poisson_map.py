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
  R with R R' = C.
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

out = {
    "x": X.tolist(), "y": y.tolist(), "c": C.tolist(),
    "b_fixed": b_fixed, "w_fixed": w_fixed.tolist(),
    "log_posterior_fixed": log_posterior(b_fixed, w_fixed),
    "map_b": float(opt.x[0]), "map_w": opt.x[1:].tolist(),
    "map_log_posterior": -float(opt.fun),
    "map_grad_norm": float(np.linalg.norm(neg_grad(opt.x))),
    "window": win, "hyper": hyper, "window_cov": C_win.tolist(),
}
with open(os.path.join(os.path.dirname(os.path.abspath(__file__)), "poisson_map.json"), "w") as f:
    json.dump(out, f, indent=1)
    f.write("\n")
print("MAP", opt.x, "L", -opt.fun, "iterations", opt.nit, "|grad|", out["map_grad_norm"])
