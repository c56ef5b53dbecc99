# numpy's batch ridge of the design behind replay's TestExportIsBatchRidge, the independent
# check that `livefield export` writes the exact ridge of the session's bins.
#
# Make the design first (the Go test writes what the session's generator made, bin by bin):
#   go test ./replay -run TestExportIsBatchRidge -dump-design
# then run with Debian's python3-numpy:
#   /usr/bin/python3 testdata/golden/export_check.py
# It reads testdata/golden/export_check/{X.npy,Y.npy,units.json} (not committed) and writes
# testdata/golden/export_check.json (committed).
#
# The ridge with an unpenalised intercept (as scikit-learn's Ridge(fit_intercept=True)):
# centre X and Y, solve (Xc'Xc + λI) W = Xc'Yc, intercept = ȳ − x̄'w. λ = 100 is livefield's
# default, 100 × the pixel variance, which is 1 for ±1 binary noise.
import json, os
import numpy as np

here = os.path.dirname(os.path.abspath(__file__))
d = os.path.join(here, "export_check")
X = np.load(os.path.join(d, "X.npy"))
Y = np.load(os.path.join(d, "Y.npy"))
units = json.load(open(os.path.join(d, "units.json")))
lam = 100.0
xm, ym = X.mean(0), Y.mean(0)
Xc, Yc = X - xm, Y - ym
G = Xc.T @ Xc + lam * np.eye(X.shape[1])
W = np.linalg.solve(G, Xc.T @ Yc)
b = ym - xm @ W
out = {
    "source": "numpy.linalg.solve of the centred ridge normal equations, testdata/golden/export_check.py",
    "lambda": lam,
    "rows": int(X.shape[0]),
    "units": [{"id": u, "intercept": float(b[i]), "weights": [float(v) for v in W[:, i]]} for i, u in enumerate(units)],
}
with open(os.path.join(here, "export_check.json"), "w") as f:
    json.dump(out, f, indent=0)
    f.write("\n")
print(f"{X.shape[0]} rows, {X.shape[1]} dimensions, {len(units)} units")
