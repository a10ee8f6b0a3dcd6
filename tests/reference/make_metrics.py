"""Reference values for plumbline's AUC and KS: scikit-learn roc_auc_score and scipy ks_2samp on
seeded scores (some rounded, so ties occur). Writes OUTDIR/metrics.json; byte-identical across
runs. Usage: python tests/reference/make_metrics.py OUTDIR
"""
import json
import os
import platform
import sys

import numpy as np
import scipy
import sklearn
from scipy.stats import ks_2samp
from sklearn.metrics import roc_auc_score


def case(name, scores, labels):
    scores = [float(s) for s in scores]
    labels = [bool(v) for v in labels]
    bad = [s for s, y in zip(scores, labels) if y]
    good = [s for s, y in zip(scores, labels) if not y]
    return {
        "name": name,
        "scores": scores,
        "defaulted": labels,
        "auc": float(roc_auc_score(labels, scores)),
        "ks": float(ks_2samp(bad, good).statistic),
    }


def main(outdir):
    rng = np.random.default_rng(20261201)
    cases = []
    for n, rate, shift, decimals in [(500, 0.12, 0.8, None), (2000, 0.05, 0.4, 2), (300, 0.4, 0.0, 1)]:
        y = rng.random(n) < rate
        s = rng.normal(size=n) + shift * y
        p = 1 / (1 + np.exp(-s))
        if decimals is not None:
            p = np.round(p, decimals)  # ties
        cases.append(case(f"n{n}_rate{rate}_shift{shift}_round{decimals}", p, y))
    out = {
        "generated_by": "tests/reference/make_metrics.py",
        "libraries": {"python": platform.python_version(), "numpy": np.__version__, "scikit-learn": sklearn.__version__, "scipy": scipy.__version__},
        "sources": {"auc": "sklearn.metrics.roc_auc_score", "ks": "scipy.stats.ks_2samp(defaulted scores, repaid scores).statistic"},
        "cases": cases,
    }
    with open(os.path.join(outdir, "metrics.json"), "w") as f:
        f.write(json.dumps(out, sort_keys=True, indent=1) + "\n")


if __name__ == "__main__":
    main(sys.argv[1])
