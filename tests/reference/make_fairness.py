"""Fair-lending reference fixture: Fisher's exact test (scipy.stats.fisher_exact, two-sided) and
the pooled two-proportion z test (statsmodels proportions_ztest) on 2x2 approval tables, and, for
small groups significantly below their control, the fewest extra approvals that bring Fisher's p
to 0.05 or more. Written by tests/reference/regen.sh; read by tests/references/reference_fairness.rs.

Each case: group approvals a of n, control approvals ac of nc.
"""
import json
import sys

import numpy as np
import scipy
import statsmodels
from scipy.stats import fisher_exact
from statsmodels.stats.proportion import proportions_ztest

CASES = [
    (1, 2, 2, 2), (3, 10, 8, 10), (20, 30, 25, 30), (40, 100, 50, 100), (39, 100, 50, 100),
    (12, 40, 30, 45), (5, 31, 25, 33), (150, 400, 300, 450), (700, 2000, 900, 2000),
    (4000, 10000, 4200, 10000), (0, 35, 10, 40), (35, 35, 30, 40), (18, 60, 45, 70),
    (45000, 100000, 46000, 100000),
]


def fewest_to_remove(a, n, ac, nc):
    for k in range(1, n - a + 1):
        if fisher_exact([[a + k, n - a - k], [ac, nc - ac]])[1] >= 0.05:
            return k
    return None


def main(out):
    cases = []
    for a, n, ac, nc in CASES:
        p = float(fisher_exact([[a, n - a], [ac, nc - ac]])[1])
        try:
            z, zp = proportions_ztest(np.array([a, ac]), np.array([n, nc]))
            z, zp = float(z), float(zp)
        except Exception:
            z, zp = None, None
        if not (np.isfinite(z) if z is not None else False):
            z, zp = None, None
        k = fewest_to_remove(a, n, ac, nc) if p < 0.05 and n <= 1000 and a * nc < ac * n else None
        cases.append({"a": a, "n": n, "ac": ac, "nc": nc, "fisher_p": p, "z": z, "z_p": zp,
                      "approvals_to_remove_significance": k})
    doc = {
        "source": "scipy.stats.fisher_exact (two-sided) and statsmodels.stats.proportion.proportions_ztest (pooled, two-sided)",
        "versions": {"scipy": scipy.__version__, "statsmodels": statsmodels.__version__, "numpy": np.__version__},
        "cases": cases,
    }
    with open(f"{out}/fairness.json", "w") as f:
        json.dump(doc, f, indent=1, sort_keys=True)
        f.write("\n")


if __name__ == "__main__":
    main(sys.argv[1])
