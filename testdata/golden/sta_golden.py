#!/usr/bin/python3
"""Reference values for online/sta_test.go, computed directly with numpy.

Run with Debian's python3 (numpy from the Debian package):
    /usr/bin/python3 testdata/golden/sta_golden.py > testdata/golden/sta_golden.json

A small synthetic block: 2x3 pixel binary frames, 3 lags, 4 units. Unit 0
fires Poisson counts, unit 1 only from bin 20 on, unit 2 in bursts, unit 3
never. Bins alternate between split half A and B in chunks of 7 bins. The
script writes the inputs and, per unit, the spike-triggered average, the two
half averages (each centred on its own half's mean stimulus), the centred
cross-correlation and the centred spike-count autocovariance at lags 0..2,
all from the dense arrays with numpy, not from running sums.
"""
import json
import numpy as np

rng = np.random.default_rng(20261202)
P, L, U = 6, 3, 4
frames = rng.choice([-1.0, 1.0], size=(80, P)) * 0.5 + 0.25  # non-zero mean on purpose
F = frames.shape[0]
nb = F - L + 1
X = np.stack([np.concatenate([frames[k - t] for t in range(L)]) for k in range(L - 1, F)])
half_a = np.array([(i // 7) % 2 == 0 for i in range(nb)])

Y = np.zeros((U, nb))
Y[0] = rng.poisson(0.7, nb)
Y[1, 20:] = rng.poisson(1.5, nb - 20)
burst = rng.random(nb) < 0.12
for k in np.nonzero(burst)[0]:
    Y[2, k:k + 3] += rng.integers(1, 4)
# unit 3 stays silent


def sta(x, y):
    if y.sum() == 0:
        return np.zeros(x.shape[1])
    return y @ x / y.sum() - x.mean(axis=0)


def autocov(y):
    c = y - y.mean()
    return [float(np.dot(c[: len(c) - d], c[d:])) for d in range(L)]


out = {
    "pixels": P, "lags": L, "frames": frames.tolist(), "half_a": half_a.tolist(),
    "counts": Y.tolist(),
    "sta": [sta(X, Y[u]).tolist() for u in range(U)],
    "half_a_sta": [sta(X[half_a], Y[u][half_a]).tolist() for u in range(U)],
    "half_b_sta": [sta(X[~half_a], Y[u][~half_a]).tolist() for u in range(U)],
    "cross": [(Y[u] @ (X - X.mean(axis=0))).tolist() for u in range(U)],
    "autocov": [autocov(Y[u]) for u in range(U)],
    "source": "numpy %s" % np.__version__,
}
print(json.dumps(out))
