#!/usr/bin/python3
"""Reference values for online.Evidence (online/evidence_test.go).

Empirical-Bayes (evidence) fits of the linear-Gaussian model by
scikit-learn's BayesianRidge (Debian's python3-sklearn), with flat
hyperpriors (alpha_1 = alpha_2 = lambda_1 = lambda_2 = 0) so that it runs
MacKay's fixed point exactly. scikit-learn's alpha_ is the noise precision
(beta in Bishop's notation) and its lambda_ the weight precision (alpha).
Run with /usr/bin/python3; it writes bayes_golden.json beside itself.
"""
import json
import os

import numpy as np
import sklearn
from sklearn.linear_model import BayesianRidge


def lagged(frames, lags):
    n = frames.shape[0]
    return np.array([np.concatenate([frames[k - i] for i in range(lags)])
                     for k in range(lags - 1, n)])


def main():
    rng = np.random.default_rng(1992)
    pixels, lags, n = 6, 3, 400
    frames = rng.choice([-1.0, 1.0], size=(n, pixels))
    x = lagged(frames, lags)
    d = x.shape[1]
    units = []
    # Units of decreasing signal-to-noise ratio, the last with Poisson counts.
    for scale, noise in [(1.0, 0.5), (0.3, 1.0), (0.1, 2.0)]:
        w = scale * rng.normal(size=d)
        y = 1.0 + x @ w + rng.normal(scale=noise, size=x.shape[0])
        units.append(y)
    w = 0.15 * rng.normal(size=d)
    units.append(rng.poisson(np.exp(-1.0 + x @ w)).astype(float))
    fits = []
    for y in units:
        m = BayesianRidge(n_iter=100000, tol=1e-13, fit_intercept=True,
                          alpha_1=0.0, alpha_2=0.0, lambda_1=0.0, lambda_2=0.0,
                          compute_score=True).fit(x, y)
        fits.append({
            "y": y.tolist(),
            "alpha": m.alpha_,    # noise precision beta
            "lambda": m.lambda_,  # weight precision alpha
            "coef": m.coef_.tolist(),
            "intercept": m.intercept_,
            "log_evidence": m.scores_[-1],
            "iterations": m.n_iter_,
        })
    out = {
        "source": "scikit-learn %s BayesianRidge(fit_intercept=True, alpha_1=alpha_2=lambda_1=lambda_2=0, tol=1e-13), numpy %s"
                  % (sklearn.__version__, np.__version__),
        "pixels": pixels,
        "lags": lags,
        "frames": frames.tolist(),
        "units": fits,
    }
    path = os.path.join(os.path.dirname(os.path.abspath(__file__)), "bayes_golden.json")
    with open(path, "w") as f:
        json.dump(out, f)


if __name__ == "__main__":
    main()
