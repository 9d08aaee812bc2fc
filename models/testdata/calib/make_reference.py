"""Writes table.csv and reference.json for models/fit_test.go.

Run by hand from this folder with /usr/bin/python3 make_reference.py
(Debian python3-sklearn, python3-scipy, python3-numpy); not run in CI. The
versions used are written into reference.json. The table is 200 rows of a
made-up validation cohort: labels Bernoulli(0.35), logits normal with a
class-dependent mean and then doubled so that they are over-confident, so
every calibrator has something to correct. Scores are written with six
decimals and read back from the CSV, so Go and Python fit the same numbers.
"""
import csv
import json

import numpy as np
import scipy
import scipy.optimize
import sklearn
from scipy.special import expit, xlogy
from sklearn.calibration import _SigmoidCalibration
from sklearn.isotonic import IsotonicRegression
from sklearn.metrics import brier_score_loss, log_loss

rng = np.random.default_rng(20240607)
n = 200
y = rng.random(n) < 0.35
z = 2.0 * (np.where(y, 0.9, -0.8) + rng.normal(0.0, 1.1, n))
# A few repeated scores so that the isotonic fit meets ties.
z[10:14] = z[9]
z[50:53] = z[49]
with open("table.csv", "w", newline="") as f:
    w = csv.writer(f)
    w.writerow(["case", "logit", "prob", "label"])
    for i in range(n):
        w.writerow([f"c{i:03d}", f"{z[i]:.6f}", f"{expit(z[i]):.6f}", "pos" if y[i] else "neg"])

rows = list(csv.DictReader(open("table.csv")))
logit = np.array([float(r["logit"]) for r in rows])
prob = np.array([float(r["prob"]) for r in rows])
lab = np.array([1 if r["label"] == "pos" else 0 for r in rows])
assert prob.min() > 0 and prob.max() < 1

# Isotonic: IsotonicRegression(out_of_bounds="clip").fit(prob, lab).predict(grid)
iso = IsotonicRegression(out_of_bounds="clip").fit(prob, lab)
xt = iso.X_thresholds_
grid = sorted(set(
    [-0.5, 0.0, prob.min() / 2, 1.0, 1.5]
    + list(np.linspace(0, 1, 101))
    + list(xt)
    + list((xt[:-1] + xt[1:]) / 2)
    + list(xt[:-1] + 0.25 * np.diff(xt))
))
iso_pred = iso.predict(np.array(grid))


def platt_objective(f, t):
    def obj(ab):
        p = expit(-(ab[0] * f + ab[1]))
        return -(xlogy(t, p) + xlogy(1 - t, 1 - p)).sum()

    def grad(ab):
        p = expit(-(ab[0] * f + ab[1]))
        d = t - p
        return np.array([d @ f, d.sum()])

    def hess(ab):
        p = expit(-(ab[0] * f + ab[1]))
        d2 = p * (1 - p)
        return np.array([[d2 @ (f * f), d2 @ f], [d2 @ f, d2.sum()]])

    return obj, grad, hess


def platt_refs(f):
    npos = lab.sum()
    nneg = n - npos
    # Platt 1999 section 2.2 smoothed targets.
    t = np.where(lab == 1, (npos + 1.0) / (npos + 2.0), 1.0 / (nneg + 2.0))
    obj, grad, hess = platt_objective(f, t)
    x0 = np.array([0.0, np.log((nneg + 1.0) / (npos + 1.0))])
    res = scipy.optimize.minimize(obj, x0, jac=grad, hess=hess, method="trust-exact", options={"gtol": 1e-12})
    sk = _SigmoidCalibration().fit(f, lab)
    return {
        "scipy_trust_exact": {"a": res.x[0], "b": res.x[1], "grad_norm": float(np.abs(grad(res.x)).max())},
        "sklearn_sigmoid_calibration": {"a": float(sk.a_), "b": float(sk.b_)},
    }


def temp_nll(T):
    u = logit / T
    # -[y log sigmoid(u) + (1-y) log(1-sigmoid(u))], summed
    return float(np.sum(np.logaddexp(0, -u) * lab + np.logaddexp(0, u) * (1 - lab)))


ts = scipy.optimize.minimize_scalar(temp_nll, bounds=(0.05, 20.0), method="bounded", options={"xatol": 1e-10})

ref = {
    "generated_by": "make_reference.py",
    "versions": {"sklearn": sklearn.__version__, "scipy": scipy.__version__, "numpy": np.__version__},
    "rows": n,
    "positives": int(lab.sum()),
    "isotonic": {
        "call": 'sklearn.isotonic.IsotonicRegression(out_of_bounds="clip").fit(prob, label).predict(grid)',
        "x_thresholds": list(xt),
        "y_thresholds": list(iso.y_thresholds_),
        "grid": list(grid),
        "predict": list(iso_pred),
    },
    "platt_logit": dict(
        call="scipy.optimize.minimize(method='trust-exact', gtol=1e-12) on Platt's smoothed-target NLL of (A*logit+B); "
        "and sklearn.calibration._SigmoidCalibration().fit(logit, label) (fmin_bfgs on the same objective)",
        **platt_refs(logit)),
    "platt_prob": dict(
        call="the same on f = scipy.special.logit(prob)",
        **platt_refs(scipy.special.logit(prob))),
    "temperature": {
        "call": "scipy.optimize.minimize_scalar(NLL(T), bounds=(0.05, 20), method='bounded', xatol=1e-10) on logit",
        "T": ts.x,
    },
    "diagnostics": {
        "call": "sklearn.metrics.brier_score_loss(label, prob), sklearn.metrics.log_loss(label, prob)",
        "brier": brier_score_loss(lab, prob),
        "log_loss": log_loss(lab, prob),
    },
}
with open("reference.json", "w") as f:
    json.dump(ref, f, indent=1, default=float)
    f.write("\n")
