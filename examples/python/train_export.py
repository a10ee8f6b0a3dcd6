"""Train a default model in scikit-learn and export it with skl2onnx, as a lender's model team
would, for `plumbline import`. Demo only: the data are the invented applications of the fictional
Fernhill Lending Co-op (`plumbline demo-data`).

usage: python examples/python/train_export.py APPLICATIONS.csv MODEL.onnx

The model's input is one float matrix whose columns are plumbline's encoded columns, in the order
the spec lists its fields: one column per number, count or boolean field; for a category, one 0/1
column per level except the base level, in the spec's level order. Empty cells stay NaN, which
HistGradientBoosting routes by its learned missing-value side (policy `tree_default` in the spec).
"""

import csv
import sys

import numpy as np
from skl2onnx import to_onnx
from sklearn.ensemble import HistGradientBoostingClassifier

NUMBERS = [
    "requested_amount", "annual_income", "debt_to_income", "revolving_utilization",
    "months_since_oldest_account", "delinquencies_24m", "inquiries_6m", "months_with_employer",
]
# Category fields: (name, levels in spec order, base level dropped from the dummies).
CATEGORIES = [
    ("housing", ["rent", "own", "mortgage", "other"], "rent"),
    ("loan_purpose", ["debt_consolidation", "home_improvement", "vehicle", "medical", "other"], "debt_consolidation"),
]


def columns():
    out = list(NUMBERS)
    for name, levels, base in CATEGORIES:
        out += [f"{name}={level}" for level in levels if level != base]
    return out


def encode(row):
    x = [float(row[n]) if row[n] != "" else np.nan for n in NUMBERS]
    for name, levels, base in CATEGORIES:
        if row[name] not in levels:
            raise SystemExit(f"{name}: unknown level {row[name]!r}")
        x += [1.0 if row[name] == level else 0.0 for level in levels if level != base]
    return x


def main(data, out):
    with open(data, newline="") as f:
        rows = list(csv.DictReader(f))
    X = np.array([encode(r) for r in rows], dtype=np.float32)
    y = np.array([int(r["defaulted"]) for r in rows])
    model = HistGradientBoostingClassifier(max_iter=200, max_depth=4, learning_rate=0.08,
                                           early_stopping=False, random_state=7).fit(X, y)
    onx = to_onnx(model, X[:1], options={id(model): {"zipmap": False}},
                  target_opset={"": 17, "ai.onnx.ml": 3})
    with open(out, "wb") as f:
        f.write(onx.SerializeToString())
    print(f"trained on {len(rows)} rows (base rate {y.mean():.4f}); wrote {out}")
    print("model input columns, in order: " + ", ".join(columns()))


if __name__ == "__main__":
    if len(sys.argv) != 3:
        raise SystemExit(__doc__)
    main(sys.argv[1], sys.argv[2])
