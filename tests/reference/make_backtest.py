"""Back-testing reference fixture: the one-sided binomial test (scipy.stats.binomtest,
alternative="greater") and the Jeffreys interval (scipy.stats.beta quantiles of
Beta(d + 1/2, n - d + 1/2) at 2.5% and 97.5%) on band counts, and a whole back-test of a
generated book of decisions: AUC (sklearn.metrics.roc_auc_score), KS (scipy.stats.ks_2samp on
the probabilities of defaulters against non-defaulters), Brier (sklearn.metrics.brier_score_loss)
and the per-band and per-decile counts, tests and intervals, computed here independently.
Written by tests/reference/regen.sh; read by tests/references/reference_backtest.rs.

The book is generated data (numpy default_rng, fixed seed), not a credit portfolio: its defaults
run about 30% above the predicted rates in the riskier half, so some bands are flagged.
"""
import json
import math
import sys

import numpy as np
import scipy
import sklearn
from scipy.stats import beta, binomtest, ks_2samp
from sklearn.metrics import brier_score_loss, roc_auc_score

CASES = [
    (0, 10, 0.1), (1, 2, 0.5), (3, 40, 0.02), (12, 100, 0.08), (50, 1000, 0.05),
    (80, 1000, 0.05), (20, 1000, 0.05), (7, 7, 0.9), (0, 500, 0.001), (250, 10000, 0.021),
    (5, 60, 0.0833), (1500, 20000, 0.07),
]
# The score scale of the book: 600 points at good:bad odds of 30, 20 points to double the odds.
POINTS, ODDS, PDO = 600.0, 30.0, 20.0
FACTOR = PDO / math.log(2.0)
OFFSET = POINTS - FACTOR * math.log(ODDS)
MIN_DEFAULTS = 5.0
ALPHA = 0.05


def band(n, d, sum_p):
    expected = sum_p / n
    p = 1.0 if d == 0 else float(binomtest(d, n, expected, alternative="greater").pvalue)
    lo = float(beta.ppf(ALPHA / 2, d + 0.5, n - d + 0.5))
    hi = float(beta.ppf(1 - ALPHA / 2, d + 0.5, n - d + 0.5))
    if max(d, expected * n) < MIN_DEFAULTS:
        rating = "not_rated"
    elif p < ALPHA:
        rating = "more_defaults_than_predicted"
    elif expected > hi:
        rating = "fewer_defaults_than_predicted"
    else:
        rating = "consistent"
    return {"decisions": n, "defaults": d, "expected_rate": expected, "observed_rate": d / n,
            "binomial_p": p, "interval": [lo, hi], "rating": rating}


def main(out):
    cases = []
    for d, n, p in CASES:
        cases.append({"defaults": d, "n": n, "predicted": p,
                      "binomial_p": float(binomtest(d, n, p, alternative="greater").pvalue),
                      "jeffreys": [float(beta.ppf(0.025, d + 0.5, n - d + 0.5)),
                                   float(beta.ppf(0.975, d + 0.5, n - d + 0.5))]})

    rng = np.random.default_rng(20261202)
    n = 4000
    prob = np.round(rng.beta(1.3, 9.0, size=n), 6)
    prob = np.clip(prob, 1e-6, 1 - 1e-6)
    truth = np.where(prob > np.median(prob), np.minimum(prob * 1.3, 1.0), prob)
    defaulted = rng.random(n) < truth
    score = np.array([int(math.floor(OFFSET - FACTOR * math.log(p / (1 - p)) + 0.5)) for p in prob])
    book = [{"probability": float(p), "score": int(s), "defaulted": bool(y)}
            for p, s, y in zip(prob, score, defaulted)]

    bands = {}
    for p, s, y in zip(prob, score, defaulted):
        k = math.floor((s - POINTS) / PDO)
        c = bands.setdefault(k, [0, 0, 0.0])
        c[0] += 1
        c[1] += int(y)
        c[2] += float(p)
    by_band = []
    for k in sorted(bands):
        lo = POINTS + k * PDO
        row = band(*bands[k])
        row["label"] = f"{lo:g} to {lo + PDO:g}"
        by_band.append(row)
    order = np.argsort(prob, kind="stable")
    deciles = [[0, 0, 0.0] for _ in range(10)]
    for rank, i in enumerate(order):
        c = deciles[rank * 10 // n]
        c[0] += 1
        c[1] += int(defaulted[i])
        c[2] += float(prob[i])
    by_decile = [dict(band(*c), label=f"decile {k + 1}") for k, c in enumerate(deciles)]

    doc = {
        "source": "scipy.stats.binomtest (alternative='greater'), scipy.stats.beta.ppf, scipy.stats.ks_2samp, sklearn.metrics.roc_auc_score and brier_score_loss",
        "versions": {"scipy": scipy.__version__, "scikit-learn": sklearn.__version__, "numpy": np.__version__},
        "cases": cases,
        "scale": {"points": POINTS, "odds": ODDS, "pdo": PDO},
        "book": book,
        "expected": {
            "auc": float(roc_auc_score(defaulted, prob)),
            "ks": float(ks_2samp(prob[defaulted], prob[~defaulted]).statistic),
            "brier": float(brier_score_loss(defaulted, prob)),
            "defaults": int(defaulted.sum()),
            "by_score_band": by_band,
            "by_decile": by_decile,
        },
    }
    with open(f"{out}/backtest.json", "w") as f:
        json.dump(doc, f, indent=1, sort_keys=True)
        f.write("\n")


if __name__ == "__main__":
    main(sys.argv[1])
