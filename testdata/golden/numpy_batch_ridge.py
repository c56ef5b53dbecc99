# numpy's batch ridge on a 30-minute reference block (16×16 binary noise at 60 Hz, 12 lags,
# 384 Poisson units), the figure the README compares the batch route with. Run by hand with
# Debian's python3-numpy: /usr/bin/python3 testdata/golden/numpy_batch_ridge.py (about 20 s, 6 GB).
import time, numpy as np
rng = np.random.default_rng(1)
T, P, L, U = 108000, 256, 12, 384
t0 = time.time()
s = np.where(rng.random((T, P)) < 0.5, -1.0, 1.0)
X = np.empty((T - L + 1, P * L))
for l in range(L):
    X[:, l*P:(l+1)*P] = s[L-1-l:T-l]
Y = rng.poisson(10/60, size=(X.shape[0], U)).astype(float)
t1 = time.time()
xm = X.mean(0); ym = Y.mean(0)
G = X.T @ X - X.shape[0] * np.outer(xm, xm)
t2 = time.time()
C = X.T @ Y - X.shape[0] * np.outer(xm, ym)
G[np.diag_indices_from(G)] += 100.0
W = np.linalg.solve(G, C)
t3 = time.time()
print(f"build {t1-t0:.1f} s; XtX {t2-t1:.1f} s; XtY+solve {t3-t2:.1f} s; ridge total {t3-t1:.1f} s")
