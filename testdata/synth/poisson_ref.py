#!/usr/bin/python3
"""Reference values for the Poisson sampler test of replay/synth.

Poisson probabilities P(N = n) for a few means, the upper tail P(N >= n_max)
lumped into the last cell, and the 0.999 quantile of the chi-square
distribution for the degrees of freedom of each table, all from SciPy
(scipy.stats.poisson, scipy.stats.chi2). Run with Debian's python3:

    /usr/bin/python3 testdata/synth/poisson_ref.py > testdata/synth/poisson_ref.json
"""
import json

import scipy
from scipy import stats

out = {"source": "scipy.stats.poisson.pmf/sf and scipy.stats.chi2.ppf, SciPy " + scipy.__version__,
       "cases": []}
for lam in (0.05, 0.5, 3.0, 20.0, 75.0):
    # Cells 0..n_max-1 and a last cell for n >= n_max, with n_max chosen so
    # that every expected count at 200000 draws is at least 5.
    n_max = 1
    while stats.poisson.sf(n_max - 1, lam) * 200000 >= 5 and n_max < 400:
        n_max += 1
    n_max -= 1
    # Start at the first cell of useful size (lumping the lower tail).
    n_min = 0
    while stats.poisson.cdf(n_min, lam) * 200000 < 5:
        n_min += 1
    probs = [float(stats.poisson.cdf(n_min, lam))]
    probs += [float(stats.poisson.pmf(n, lam)) for n in range(n_min + 1, n_max)]
    probs.append(float(stats.poisson.sf(n_max - 1, lam)))
    out["cases"].append({
        "lambda": lam,
        "first": n_min,  # cell 0 holds N <= first
        "probs": probs,  # then one cell per count, the last holds N >= first+len-1
        "chi2_999": float(stats.chi2.ppf(0.999, len(probs) - 1)),
    })
print(json.dumps(out, indent=1))
