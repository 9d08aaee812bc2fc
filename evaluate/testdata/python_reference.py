"""Regenerates python_reference.json from statsmodels and scikit-learn
(Debian python3-statsmodels, python3-sklearn). Not run in CI:
/usr/bin/python3 python_reference.py"""
import csv, json, sys
import numpy as np
import sklearn, statsmodels
import statsmodels.api as sm
from sklearn.metrics import brier_score_loss, roc_auc_score, roc_curve
from statsmodels.stats.contingency_tables import mcnemar
from statsmodels.stats.proportion import proportion_confint

rows = list(csv.DictReader(open("small.csv")))
y = np.array([int(r["label"]) for r in rows])
p = np.array([float(r["prob"]) for r in rows])
out = {"tool": "statsmodels %s, scikit-learn %s, numpy %s, Python %s" % (
    statsmodels.__version__, sklearn.__version__, np.__version__, sys.version.split()[0])}

out["wilson"] = {"call": 'proportion_confint(k, n, alpha=0.05, method="wilson")', "cases": []}
for k, n in [(0, 10), (10, 10), (1, 1), (7, 20), (41, 113), (95, 100), (3, 250)]:
    lo, hi = proportion_confint(k, n, alpha=0.05, method="wilson")
    out["wilson"]["cases"].append({"k": k, "n": n, "ci95": [lo, hi]})

out["mcnemar"] = {"call": "mcnemar(table, exact=True).pvalue", "cases": []}
for t in [[[30, 9], [3, 18]], [[10, 0], [0, 5]], [[5, 13], [2, 7]], [[1, 40], [25, 1]]]:
    out["mcnemar"]["cases"].append({"table": t, "p_value": mcnemar(t, exact=True).pvalue})

fpr, tpr, thr = roc_curve(y, p, drop_intermediate=False)
out["sklearn"] = {
    "calls": ["brier_score_loss(y, p)", "roc_auc_score(y, p)", "roc_curve(y, p, drop_intermediate=False)"],
    "brier": brier_score_loss(y, p), "auc": roc_auc_score(y, p),
    "roc": {"fpr": fpr.tolist(), "tpr": tpr.tolist(), "thresholds": [None if np.isinf(t) else t for t in thr]},
}

x = np.log(p / (1 - p))
slope_fit = sm.GLM(y, sm.add_constant(x), family=sm.families.Binomial()).fit(tol=1e-12)
icpt_fit = sm.GLM(y, np.ones((len(y), 1)), family=sm.families.Binomial(), offset=x).fit(tol=1e-12)
out["calibration"] = {
    "calls": ["GLM(y, add_constant(logit(p)), family=Binomial()).fit().params[1]",
              "GLM(y, ones, family=Binomial(), offset=logit(p)).fit().params[0]"],
    "slope": slope_fit.params[1], "intercept": icpt_fit.params[0],
}
json.dump(out, open("python_reference.json", "w"), indent=1)
