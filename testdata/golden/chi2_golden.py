#!/usr/bin/python3
"""Reference values for online/null_test.go, from scipy.stats.chi2.

Run with Debian's python3 (numpy and scipy from Debian packages):
    /usr/bin/python3 testdata/golden/chi2_golden.py > testdata/golden/chi2_golden.json

- "isf": upper critical values chi2.isf(alpha, nu) at the (nu, alpha) rows
  that the Go test types in from the NIST/SEMATECH e-Handbook table
  (section 1.3.6.7.4), so that a typo in the typed-in table shows.
- "logsf": -log10 of the upper tail far out, where the regularised incomplete
  gamma function underflows in double precision: mpmath's gammainc(nu/2,
  q/2, regularized=True) at 50 digits (Debian's python3-mpmath; scipy's
  chi2.logsf underflows there too).
- "sf": moderate tail probabilities.
"""
import json
import scipy
from scipy.stats import chi2
import numpy as np
import mpmath

mpmath.mp.dps = 50

dofs = [1, 2, 5, 10, 20, 30, 50, 100]
alphas = [0.10, 0.05, 0.025, 0.01, 0.001]
isf = [{"nu": nu, "alpha": a, "crit": float(chi2.isf(a, nu))} for nu in dofs for a in alphas]

far = [(10, 1500.0), (10, 3000.0), (50, 1800.0), (100, 2500.0), (100, 5000.0),
       (500, 3500.0), (1000, 4500.0), (1000, 8000.0), (4096, 9000.0)]
def neglog10sf(q, nu):
    return float(-mpmath.log10(mpmath.gammainc(mpmath.mpf(nu) / 2, mpmath.mpf(q) / 2, mpmath.inf, regularized=True)))


logsf = [{"nu": nu, "q": q, "neglog10p": neglog10sf(q, nu)} for nu, q in far]

mid = [(1, 0.5), (3, 7.0), (12, 30.0), (64, 100.0), (64, 200.0), (768, 900.0), (2.5, 4.0)]
sf = [{"nu": nu, "q": q, "p": float(chi2.sf(q, nu))} for nu, q in mid]

print(json.dumps({"source": "scipy %s scipy.stats.chi2, mpmath %s" % (scipy.__version__, mpmath.__version__),
                  "isf": isf, "logsf": logsf, "sf": sf}, indent=1))
