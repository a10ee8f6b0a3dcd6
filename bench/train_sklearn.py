"""scikit-learn half of the training / evaluation benchmark (bench/train_compare.sh runs it).

usage: python bench/train_sklearn.py startup
       python bench/train_sklearn.py train --spec SPEC --data CSV --out MODEL.pkl --folds K --seed S
       python bench/train_sklearn.py evaluate --spec SPEC --model MODEL.pkl --data CSV
       python bench/train_sklearn.py report MEASUREMENTS.jsonl RESULTS.md

The model, its encoding and its settings all come from the plumbline training spec, so both
sides fit the same thing:
  - numeric fields in spec order, blanks replaced by the spec's imputed value;
  - each category as n-1 dummies in level order, the spec's base level dropped;
  - kind logistic: LogisticRegression, unpenalised (C=inf, the non-deprecated spelling of
    penalty=None), Newton-Cholesky on standardised columns (plumbline's IRLS standardises too);
  - kind forest: RandomForestClassifier with the spec's trees, max_depth and min_samples_leaf,
    max_features="sqrt" (smartcore's default m = floor(sqrt(columns)): 3 of 15), bootstrap, n_jobs=1.

`train` does what `plumbline train` does: read and encode the CSV, one final fit on every row,
stratified K-fold cross-validated AUC (fit on K-1 folds, score the held-out fold), and write the
model (pickle). `evaluate` loads the model, reads and encodes the CSV, predicts, and computes
plumbline evaluate's report: AUC, Gini, KS, Brier, log loss, calibration deciles and the confusion
at the approve, decline and cost-optimal cutoffs. Each prints one JSON object: `seconds` is the
time from after the imports to the end of the task (interpreter start-up and imports excluded),
`phases` splits it, `import_seconds` is the import time. `startup` only imports, so its process
wall time and peak RSS are the Python baseline that every other task carries.

`report` turns the shell's measurements into the side-by-side table (stdout and markdown).
"""

import os

for _v in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMEXPR_NUM_THREADS"):
    os.environ[_v] = "1"

import time  # noqa: E402

_T_IMPORT = time.perf_counter()

import argparse  # noqa: E402
import json  # noqa: E402
import pickle  # noqa: E402
import sys  # noqa: E402

import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
import sklearn  # noqa: E402
from sklearn.ensemble import RandomForestClassifier  # noqa: E402
from sklearn.linear_model import LogisticRegression  # noqa: E402
from sklearn.metrics import brier_score_loss, log_loss, roc_auc_score, roc_curve  # noqa: E402
from sklearn.model_selection import StratifiedKFold  # noqa: E402
from sklearn.pipeline import make_pipeline  # noqa: E402
from sklearn.preprocessing import StandardScaler  # noqa: E402

IMPORT_SECONDS = time.perf_counter() - _T_IMPORT

# plumbline evaluate's default costs (--cost-missed-default, --cost-lost-good).
COST_MISSED_DEFAULT = 5.0
COST_LOST_GOOD = 1.0


class Clock:
    """Named phases from one start; `seconds` is the total."""

    def __init__(self):
        self.start = self.last = time.perf_counter()
        self.phases = {}

    def lap(self, name):
        now = time.perf_counter()
        self.phases[name] = round(now - self.last, 4)
        self.last = now

    def result(self, **fields):
        return {"seconds": round(self.last - self.start, 4), "phases": self.phases,
                "import_seconds": round(IMPORT_SECONDS, 4), **fields}


def read_json(path):
    with open(path) as fh:
        return json.load(fh)


def encode(spec, csv_path):
    """The CSV as plumbline encodes it for this spec: (X float64 rows x columns, y 0/1)."""
    feats = [f for f in spec["features"] if f.get("scored", True)]
    dtypes = {f["name"]: ("category" if f["kind"] == "category" else "float64") for f in feats}
    df = pd.read_csv(csv_path, usecols=[*dtypes, spec["target"]], dtype={**dtypes, spec["target"]: "int8"})
    cols = []
    for f in feats:
        v = df[f["name"]]
        if f["kind"] == "category":
            cols += [(v == level).to_numpy(np.float64) for level in f["levels"] if level != f["base_level"]]
        else:
            if f["missing"]["policy"] == "impute":
                v = v.fillna(f["missing"]["value"])
            cols.append(v.to_numpy(np.float64))
    x = np.column_stack(cols)
    if not np.isfinite(x).all():
        sys.exit(f"{csv_path}: a field without an impute policy has blanks")
    return x, df[spec["target"]].to_numpy()


def model_for(spec, seed):
    if spec.get("kind", "logistic") == "logistic":
        if spec.get("l2", 0) != 0:
            sys.exit("a penalised logistic spec (l2 > 0) has no unpenalised sklearn counterpart here")
        return make_pipeline(StandardScaler(), LogisticRegression(C=np.inf, solver="newton-cholesky", tol=1e-8,
                                                                  max_iter=100))
    f = spec["forest"]
    return RandomForestClassifier(n_estimators=f["trees"], max_depth=f["max_depth"],
                                  min_samples_leaf=f["min_samples_leaf"], max_features="sqrt",
                                  bootstrap=True, n_jobs=1, random_state=seed)


def shape(model):
    """What was fitted: Newton iterations, or the trees' size (to set against smartcore's)."""
    if isinstance(model, RandomForestClassifier):
        return {"mean_leaves": float(np.mean([t.get_n_leaves() for t in model.estimators_])),
                "max_depth": int(max(t.get_depth() for t in model.estimators_))}
    return {"newton_iterations": int(model[-1].n_iter_[0])}


def train(args):
    spec = read_json(args.spec)
    clock = Clock()
    x, y = encode(spec, args.data)
    clock.lap("read_encode")
    model = model_for(spec, args.seed).fit(x, y)
    clock.lap("final_fit")
    cv_auc = []
    for tr, te in StratifiedKFold(args.folds, shuffle=True, random_state=args.seed).split(x, y):
        m = model_for(spec, args.seed).fit(x[tr], y[tr])
        cv_auc.append(roc_auc_score(y[te], m.predict_proba(x[te])[:, 1]))
    clock.lap("cross_validation")
    with open(args.out, "wb") as fh:
        pickle.dump(model, fh, protocol=pickle.HIGHEST_PROTOCOL)
    clock.lap("write_model")
    return clock.result(rows=len(y), columns=x.shape[1], cv_auc=[round(a, 4) for a in cv_auc], **shape(model))


def at_cutoff(p, y, cutoff):
    approve = p < cutoff
    missed, good = int(np.sum(approve & (y == 1))), int(np.sum(approve & (y == 0)))
    caught, lost = int(np.sum(~approve & (y == 1))), int(np.sum(~approve & (y == 0)))
    n = len(y)
    return {"cutoff": float(cutoff), "caught_defaults": caught, "lost_goods": lost, "missed_defaults": missed,
            "approved_goods": good, "approval_rate": (missed + good) / n, "accuracy": (caught + good) / n,
            "expected_cost_per_application": (missed * COST_MISSED_DEFAULT + lost * COST_LOST_GOOD) / n}


def cost_optimal(p, y):
    """Least expected cost over cutoffs at every distinct probability (and approving everyone);
    ties keep the lower cutoff, as plumbline's sweep does."""
    order = np.argsort(p, kind="stable")
    ps, ys = p[order], y[order]
    cutoffs, first = np.unique(ps, return_index=True)
    bad_below = np.concatenate([np.cumsum(ys)[first - 1] * (first > 0), [ys.sum()]])
    good_below = np.concatenate([first, [len(ys)]]) - bad_below
    cost = bad_below * COST_MISSED_DEFAULT + (len(ys) - ys.sum() - good_below) * COST_LOST_GOOD
    best = int(np.argmin(cost))
    return at_cutoff(p, y, cutoffs[best] if best < len(cutoffs) else 1.0 + np.finfo(float).eps)


def evaluate(args):
    spec = read_json(args.spec)
    clock = Clock()
    with open(args.model, "rb") as fh:
        model = pickle.load(fh)
    clock.lap("load_model")
    x, y = encode(spec, args.data)
    clock.lap("read_encode")
    p = model.predict_proba(x)[:, 1]
    clock.lap("predict")
    n = len(y)
    auc = roc_auc_score(y, p)
    fpr, tpr, _ = roc_curve(y, p)
    order = np.argsort(p, kind="stable")
    bounds = np.arange(11) * n // 10
    calibration = [{"rows": int(hi - lo), "mean_predicted": float(p[order[lo:hi]].mean()),
                    "observed_rate": float(y[order[lo:hi]].mean())} for lo, hi in zip(bounds, bounds[1:]) if hi > lo]
    policy = spec["policy"]
    metrics = {"rows": n, "base_rate": float(y.mean()), "auc": auc, "gini": 2 * auc - 1,
               "ks": float(np.max(np.abs(tpr - fpr))), "brier": brier_score_loss(y, p), "log_loss": log_loss(y, p),
               "calibration": calibration, "at_approve_cutoff": at_cutoff(p, y, policy["approve_below"]),
               "at_decline_cutoff": at_cutoff(p, y, policy["decline_at_or_above"]),
               "cost_optimal": cost_optimal(p, y), "cost_missed_default": COST_MISSED_DEFAULT,
               "cost_lost_good": COST_LOST_GOOD, "accuracy_approve_everyone": 1 - float(y.mean())}
    clock.lap("metrics")
    return clock.result(rows=n, auc=metrics["auc"], report=metrics)


def tree_shape(nodes):
    """(leaves, depth in edges) of one plumbline artifact tree."""
    leaves, depth, stack = 0, 0, [(0, 0)]
    while stack:
        i, d = stack.pop()
        if "column" in nodes[i]:
            stack += [(nodes[i]["left"], d + 1), (nodes[i]["right"], d + 1)]
        else:
            leaves, depth = leaves + 1, max(depth, d)
    return leaves, depth


def numbers(value, path=""):
    """Every number in a JSON value, by path."""
    if isinstance(value, dict):
        return {k: v for key, item in value.items() for k, v in numbers(item, f"{path}.{key}").items()}
    if isinstance(value, list):
        return {k: v for i, item in enumerate(value) for k, v in numbers(item, f"{path}[{i}]").items()}
    return {path: value} if isinstance(value, (int, float)) else {}


def report(args):
    """The side-by-side table, printed and written as markdown, from the shell's JSON lines: one
    `environment` line, then per run side, task, rows, wall seconds and peak RSS (KiB) from
    /usr/bin/time, the run's stdout file and the model it wrote or read."""
    with open(args.measurements) as fh:
        lines = [json.loads(line) for line in fh]
    env = lines[0]
    runs = {(m["side"], m["task"], m["rows"]): m for m in lines[1:]}
    for m in runs.values():
        with open(m["stdout"]) as fh:
            text = fh.read()
        m["out"] = json.loads(text) if text.startswith("{") else None
    loads = [m["load"] for m in runs.values()]
    startup = runs.pop(("sklearn", "startup", 0))
    versions = startup["out"]

    def per_second(rows, seconds):
        return f"{rows / seconds:,.0f}" if seconds > 0 else "-"

    head = ["task", "rows", "plumbline s", "plumbline rows/s", "plumbline MiB", "sklearn s", "sklearn rows/s",
            "sklearn MiB", "sklearn process s", "AUC plumbline / sklearn"]
    table, forest_notes, logistic_notes, extra_sections = [], [], [], set()
    for (side, task, rows), pl in runs.items():
        if side != "plumbline":
            continue
        sk = runs[("sklearn", task, rows)]
        if task.startswith("train"):
            artifact = read_json(pl["model"])
            auc = (artifact["provenance"]["cv_auc_mean"], float(np.mean(sk["out"]["cv_auc"])))
            if task == "train forest":
                shapes = [tree_shape(t["nodes"]) for t in artifact["model"]["trees"]]
                forest_notes.append(
                    f"{rows:,} rows: smartcore {np.mean([s[0] for s in shapes]):.1f} leaves per tree, depth at most "
                    f"{max(s[1] for s in shapes)}; sklearn {sk['out']['mean_leaves']:.1f}, depth at most "
                    f"{sk['out']['max_depth']}")
        else:
            auc = (pl["out"]["auc"], sk["out"]["auc"])
            if task == "evaluate logistic":
                ours, theirs = numbers(pl["out"]), numbers(sk["out"]["report"])
                shared = ours.keys() & theirs.keys()
                gap = max(abs(ours[k] - theirs[k]) for k in shared)
                logistic_notes.append(f"{rows:,} rows: {len(shared)} numbers, largest difference {gap:.1e}")
            extra_sections |= set(pl["out"]) - set(sk["out"]["report"])
        sk_s = sk["out"]["seconds"]
        table.append([task, f"{rows:,}", f"{pl['wall_s']:.2f}", per_second(rows, pl["wall_s"]),
                      f"{pl['maxrss_kib'] / 1024:,.0f}", f"{sk_s:.2f}", per_second(rows, sk_s),
                      f"{sk['maxrss_kib'] / 1024:,.0f}", f"{sk['wall_s']:.2f}", f"{auc[0]:.4f} / {auc[1]:.4f}"])
    k = env["folds"]
    notes = [
        f"train: read and encode the CSV, one final fit on all rows, stratified {k}-fold cross-validation "
        f"(fit on {k - 1} of {k} folds, score the held-out fold, AUC), write the model. plumbline: the whole "
        "`plumbline train` process (its CSV reader checks every cell against the field rules; the forest's "
        "covers are re-counted on the training rows; the artifact is validated by loading it). sklearn: "
        "pandas read_csv, LogisticRegression (C=inf, newton-cholesky on standardised columns) or "
        "RandomForestClassifier, StratifiedKFold, pickle. plumbline's artifact also carries what serving and "
        "review need (reference population for explanations, development-sample stability bins; for forests a "
        "partial-dependence check of the stated risk directions), which the sklearn side does not build.",
        "evaluate: load the model, read and encode a held-out CSV of as many rows (another seed), predict, "
        "compute AUC, Gini, KS, Brier, log loss, calibration deciles and the confusion at the approve, decline "
        "and cost-optimal cutoffs. plumbline: the whole `plumbline evaluate --json` process. sklearn: "
        "predict_proba, roc_auc_score, roc_curve (KS), brier_score_loss, log_loss, numpy for the rest."
        + (" plumbline's report also has " + ", ".join(sorted(extra_sections)) + " (population stability of "
           "each field and the score against the artifact's development bins), not computed on the sklearn side."
           if extra_sections else ""),
        "seconds: plumbline is process wall time; `sklearn s` is measured inside the Python process from after "
        "the imports to the end of the task, and `sklearn process s` is the whole process (Python start-up "
        f"alone: {startup['wall_s']:.2f} s, {startup['maxrss_kib'] / 1024:,.0f} MiB). MiB: peak resident set "
        "size of the process (/usr/bin/time), so the sklearn figures include that start-up baseline.",
        "AUC: cross-validated mean for train, held-out for evaluate; each side scores its own fitted model.",
        "Same inputs and metrics, checked: both logistic fits reach the same maximum-likelihood coefficients, so "
        "their held-out evaluate reports (every number: metrics, calibration deciles, cutoff confusions) should "
        "agree to rounding: " + "; ".join(logistic_notes) + ".",
        "Forests: same trees, max_depth, min_samples_leaf and sqrt(columns) = 3 candidate columns per split, "
        "yet smartcore 0.4 grows smaller trees. Its max_depth counts the root as level 1 and growth (breadth "
        "first) stops once any node reaches it, so splits go down to depth 5 and a single node is split at depth 6; "
        "and a node whose best split leaves a child under min_samples_leaf becomes a leaf, where sklearn takes "
        "the best split that satisfies it. (Its bootstrap also keeps each class's count.) Final fits: "
        + "; ".join(forest_notes) + ".",
    ]
    widths = [max(len(r[i]) for r in [head, *table]) for i in range(len(head))]
    print("  ".join(h.ljust(w) for h, w in zip(head, widths)))
    for r in table:
        print("  ".join(c.ljust(w) if i == 0 else c.rjust(w) for i, (c, w) in enumerate(zip(r, widths))))
    print()
    print("\n".join(notes))
    md = ["# Training and evaluation throughput: plumbline vs scikit-learn", "",
          f"{env['when']}, {env['cpu']} ({env['cores']} cores), one thread on both sides (1-minute load average "
          f"after each run: {min(loads):.2f} to {max(loads):.2f}). plumbline {env['plumbline']} (release build); "
          f"scikit-learn {versions['sklearn']}, numpy {versions['numpy']}, pandas {versions['pandas']}, "
          f"Python {versions['python']}. Data: `plumbline demo-data` (Fernhill Lending Co-op, invented). "
          "Written by `bench/train_compare.sh`.", "",
          "| " + " | ".join(head) + " |", "|---|" + "---:|" * (len(head) - 1)]
    md += ["| " + " | ".join(r) + " |" for r in table]
    md += [""] + [f"- {n}" for n in notes]
    with open(args.markdown, "w") as fh:
        fh.write("\n".join(md) + "\n")


def main():
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    sub = ap.add_subparsers(dest="cmd", required=True)
    sub.add_parser("startup")
    t = sub.add_parser("train")
    for a in ("--spec", "--data", "--out"):
        t.add_argument(a, required=True)
    t.add_argument("--folds", type=int, default=5)
    t.add_argument("--seed", type=int, default=2026)
    e = sub.add_parser("evaluate")
    for a in ("--spec", "--model", "--data"):
        e.add_argument(a, required=True)
    r = sub.add_parser("report")
    r.add_argument("measurements")
    r.add_argument("markdown")
    args = ap.parse_args()
    if args.cmd == "report":
        report(args)
        return
    if args.cmd == "startup":
        result = Clock().result(sklearn=sklearn.__version__, numpy=np.__version__, pandas=pd.__version__,
                                python=sys.version.split()[0])
    else:
        result = {"train": train, "evaluate": evaluate}[args.cmd](args)
    print(json.dumps(result))


if __name__ == "__main__":
    main()
