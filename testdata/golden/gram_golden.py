#!/usr/bin/python3
"""Reference values for online.BatchRidge (online/gram_test.go).

Ridge regression with a free intercept on the lagged design of small
synthetic stimuli, solved by scikit-learn's Ridge(alpha=lambda,
fit_intercept=True) (Debian's python3-sklearn). Run with /usr/bin/python3;
it writes gram_golden.json beside itself.
"""
import json
import os

import numpy as np
import sklearn
from sklearn.linear_model import Ridge


def lagged(frames, lags):
    """Rows x_k = [s_k; s_{k-1}; ...; s_{k-L+1}] for k = L-1 .. n-1."""
    n = frames.shape[0]
    return np.array([np.concatenate([frames[k - i] for i in range(lags)])
                     for k in range(lags - 1, n)])


def case(name, rng, pixels, lags, n, units, lam, binary):
    if binary:
        frames = rng.choice([-1.0, 1.0], size=(n, pixels))
    else:
        frames = rng.normal(size=(n, pixels))
    x = lagged(frames, lags)
    w = rng.normal(size=(x.shape[1], units))
    y = x @ w + 2.0 + rng.normal(scale=1.5, size=(x.shape[0], units))
    model = Ridge(alpha=lam, fit_intercept=True, solver="cholesky").fit(x, y)
    return {
        "name": name,
        "pixels": pixels,
        "lags": lags,
        "lambda": lam,
        "frames": frames.tolist(),
        "y": y.tolist(),  # one row per used bin k = lags-1 .. n-1
        "coef": model.coef_.tolist(),  # units x D
        "intercept": model.intercept_.tolist(),
    }


def main():
    rng = np.random.default_rng(20261202)
    out = {
        "source": "scikit-learn %s Ridge(fit_intercept=True, solver='cholesky'), numpy %s"
                  % (sklearn.__version__, np.__version__),
        "cases": [
            case("gaussian", rng, 6, 3, 160, 3, 4.0, False),
            case("binary", rng, 5, 4, 300, 2, 25.0, True),
        ],
    }
    path = os.path.join(os.path.dirname(os.path.abspath(__file__)), "gram_golden.json")
    with open(path, "w") as f:
        json.dump(out, f)


if __name__ == "__main__":
    main()
