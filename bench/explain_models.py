"""Python half of the side-by-side explain benchmark.

usage: python bench/explain_models.py OUTDIR          train, export, time; writes OUTDIR/*
       python bench/explain_models.py --summary OUTDIR print OUTDIR/python_timings.json as a table

Writes to OUTDIR:
  boosted500.json, forest100.json   the two models as plumbline artifacts (tests/reference/convert.py)
  rows.json                         JSON array of the 1,000 test applicants the timings use
  reference_contributions.json      library contributions for the first 20 rows (sanity check)
  boosted500.lgb.txt, forest100.pkl the same models in their libraries' own formats (for load timing)
  python_timings.json               the timings, peak RSS and library versions

Everything runs single-threaded (thread variables are set to 1 before numpy is imported, LightGBM
gets num_threads=1). Each measurement runs in a fresh subprocess of this script so that load time
and peak RSS (VmHWM, see maxrss_kib) belong to that measurement alone.
"""

import os

for _v in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMEXPR_NUM_THREADS", "NUMBA_NUM_THREADS"):
    os.environ[_v] = "1"

import json  # noqa: E402
import platform  # noqa: E402
import resource  # noqa: E402
import statistics  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402

sys.dont_write_bytecode = True  # keep __pycache__ out of the source tree
HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.join(HERE, "..", "tests", "reference"))

SEED = 20261202
N_FEATURES = 10
NAMES = [f"x{i}" for i in range(N_FEATURES)]
N_TRAIN = 20_000
N_ROWS = 1_000
N_SINGLE = 200
N_BACKGROUND = 100
N_REFERENCE = 20
BOUNDS = (-1000.0, 1000.0)
REPEATS = 3  # batch timings are repeated; the minimum and median are reported

LGB_PARAMS = {
    "objective": "binary",
    "num_leaves": 63,
    "max_depth": 6,
    "min_data_in_leaf": 20,
    "learning_rate": 0.05,
    "num_threads": 1,
    "deterministic": True,
    "force_row_wise": True,
    "seed": SEED,
    "verbose": -1,
}
LGB_ROUNDS = 500
FOREST_PARAMS = {"n_estimators": 100, "max_depth": 12, "min_samples_leaf": 5, "random_state": SEED, "n_jobs": 1}


def ns():
    return time.perf_counter_ns()


def maxrss_kib():
    """Peak resident set size of this process, in KiB.

    VmHWM from /proc/self/status where there is one: getrusage(RUSAGE_SELF).ru_maxrss is not
    usable in a child started by fork/vfork + exec, since Linux carries the parent's high-water
    mark over the exec (a child of a 300 MiB parent reports at least 300 MiB). Elsewhere falls
    back to ru_maxrss (KiB on Linux, bytes on macOS)."""
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1])
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss


def make_data(n):
    import numpy as np

    rng = np.random.default_rng(SEED)
    X = rng.normal(0.0, 1.0, (n, N_FEATURES))
    X[:, 1] = rng.uniform(-2.0, 2.0, n)
    X[:, 2] = 0.6 * X[:, 0] + 0.8 * X[:, 2]
    X[:, 3] = rng.exponential(1.0, n)
    X[:, 5] = rng.integers(0, 10, n)
    X[:, 7] = rng.lognormal(0.0, 0.7, n)
    X = X.astype(np.float32).astype(np.float64)  # float32-representable
    x = X.T
    logit = (
        -4.0
        + 0.8 * x[0]
        + 0.7 * np.sin(2.0 * x[1])
        + 0.8 * x[0] * x[2]
        - 0.5 * (x[3] - 1.0)
        + 0.4 * (x[4] > 0.5)
        + 0.1 * x[5]
        - 0.3 * x[6] * x[8]
        + 0.3 * np.log(x[7])
        + 0.2 * np.abs(x[9])
    )
    y = (rng.uniform(0.0, 1.0, n) < 1.0 / (1.0 + np.exp(-logit))).astype(np.int64)
    return X, y


def versions():
    import lightgbm
    import numpy
    import shap
    import sklearn

    return {
        "python": platform.python_version(),
        "numpy": numpy.__version__,
        "lightgbm": lightgbm.__version__,
        "scikit-learn": sklearn.__version__,
        "shap": shap.__version__,
    }


def load_rows(outdir):
    import numpy as np

    with open(os.path.join(outdir, "rows.json"), encoding="utf-8") as fh:
        rows = json.load(fh)
    return np.array([[np.nan if r[n] is None else r[n] for n in NAMES] for r in rows], dtype=np.float64)


# ------------------------------------------------------------------------------------------
# subprocess measurements (each in a fresh interpreter)
# ------------------------------------------------------------------------------------------


def measure(kind, mode, outdir):
    """kind: boosted500 | forest100; mode: time | rss. Prints one JSON object."""
    warnings.filterwarnings("ignore")
    t0 = ns()
    import numpy as np  # noqa: F401

    if kind == "boosted500":
        import lightgbm as lgb
    else:
        import pickle

        import shap
    import_s = (ns() - t0) / 1e9
    X = load_rows(outdir)
    rss_import = maxrss_kib()
    out = {"import_seconds": import_s, "rss_after_import_kib": rss_import}

    t0 = ns()
    if kind == "boosted500":
        booster = lgb.Booster(model_file=os.path.join(outdir, "boosted500.lgb.txt"))
        out["load_seconds"] = (ns() - t0) / 1e9

        def batch():
            return booster.predict(X, pred_contrib=True, num_threads=1)

        def single(i):
            return booster.predict(X[i : i + 1], pred_contrib=True, num_threads=1)
    else:
        with open(os.path.join(outdir, "forest100.pkl"), "rb") as fh:
            forest = pickle.load(fh)
        out["load_seconds"] = (ns() - t0) / 1e9
        t1 = ns()
        explainer = shap.TreeExplainer(forest)  # tree_path_dependent (no background)
        out["explainer_init_seconds"] = (ns() - t1) / 1e9
        out["load_seconds_total"] = out["load_seconds"] + out["explainer_init_seconds"]

        def batch():
            return explainer.shap_values(X, check_additivity=False)

        def single(i):
            return explainer.shap_values(X[i : i + 1], check_additivity=False)

    if mode == "rss":
        batch()
        out["peak_rss_kib"] = maxrss_kib()
    else:
        secs = []
        for _ in range(REPEATS):
            t1 = ns()
            batch()
            secs.append((ns() - t1) / 1e9)
        out["batch_rows"] = X.shape[0]
        out["batch_seconds"] = secs
        out["batch_per_row_us_min"] = min(secs) / X.shape[0] * 1e6
        out["batch_per_row_us_median"] = statistics.median(secs) / X.shape[0] * 1e6
        single(0)  # warm-up
        t1 = ns()
        for i in range(N_SINGLE):
            single(i)
        s = (ns() - t1) / 1e9
        out["single_row_calls"] = N_SINGLE
        out["single_row_seconds"] = s
        out["single_row_per_row_us"] = s / N_SINGLE * 1e6
    print(json.dumps(out))


def run_measure(kind, mode, outdir):
    env = dict(os.environ)
    proc = subprocess.run(
        [sys.executable, os.path.abspath(__file__), "--measure", kind, mode, outdir],
        env=env,
        check=True,
        stdout=subprocess.PIPE,
        text=True,
    )
    return json.loads(proc.stdout.strip().splitlines()[-1])


def baseline_rss():
    """Peak RSS of an interpreter that only imports numpy, LightGBM, scikit-learn and shap."""
    code = (
        "import os\n"
        "for v in ('OMP_NUM_THREADS','OPENBLAS_NUM_THREADS','MKL_NUM_THREADS','NUMBA_NUM_THREADS'): os.environ[v]='1'\n"
        "import numpy, lightgbm, sklearn.ensemble, shap\n"
        "import explain_models\n"
        "print(explain_models.maxrss_kib())\n"
    )
    env = dict(os.environ, PYTHONPATH=HERE, PYTHONDONTWRITEBYTECODE="1")
    proc = subprocess.run([sys.executable, "-c", code], check=True, stdout=subprocess.PIPE, text=True, env=env)
    return int(proc.stdout.strip().splitlines()[-1])


# ------------------------------------------------------------------------------------------
# main: train, export, time
# ------------------------------------------------------------------------------------------


def main(outdir):
    import pickle

    import lightgbm as lgb
    import numpy as np
    import sklearn
    from sklearn.ensemble import RandomForestClassifier

    import convert as cv

    warnings.filterwarnings("ignore")
    os.makedirs(outdir, exist_ok=True)
    log = sys.stderr

    X, y = make_data(N_TRAIN + N_ROWS)
    Xtr, ytr, Xte = X[:N_TRAIN], y[:N_TRAIN], X[N_TRAIN:]
    bg = Xtr[np.sort(np.random.default_rng(SEED + 1).choice(N_TRAIN, N_BACKGROUND, replace=False))]

    t0 = ns()
    booster = lgb.train(LGB_PARAMS, lgb.Dataset(Xtr, ytr, feature_name=NAMES), num_boost_round=LGB_ROUNDS)
    lgb_train_s = (ns() - t0) / 1e9
    print(f"explain_models: LightGBM trained in {lgb_train_s:.1f} s", file=log)
    t0 = ns()
    forest = RandomForestClassifier(**FOREST_PARAMS).fit(Xtr, ytr)
    forest_train_s = (ns() - t0) / 1e9
    print(f"explain_models: forest trained in {forest_train_s:.1f} s", file=log)

    lgb_trees = cv.lightgbm_trees(booster.dump_model(), NAMES, N_TRAIN)
    common = dict(feature_names=NAMES, bounds=BOUNDS, background=bg, reference_label="training rows (generated)")
    lgb_art = cv.make_artifact(
        model_id="bench-boosted500",
        description="Benchmark LightGBM model, 500 trees, generated data (not a credit model)",
        producer=f"bench/explain_models.py (lightgbm {lgb.__version__})",
        aggregation="sum_log_odds",
        trees=lgb_trees,
        provenance={"seed": SEED, "training_rows": N_TRAIN, "params": {**LGB_PARAMS, "num_boost_round": LGB_ROUNDS}},
        **common,
    )
    f_trees = cv.forest_trees(forest, NAMES)
    f_art = cv.make_artifact(
        model_id="bench-forest100",
        description="Benchmark scikit-learn random forest, 100 trees, generated data (not a credit model)",
        producer=f"bench/explain_models.py (scikit-learn {sklearn.__version__})",
        aggregation="mean_probability",
        trees=f_trees,
        provenance={"seed": SEED, "training_rows": N_TRAIN, "params": FOREST_PARAMS},
        **common,
    )
    # the artifacts must score exactly like their libraries
    for name, art, want in (
        ("boosted500", lgb_art, booster.predict(Xte, raw_score=True, num_threads=1)),
        ("forest100", f_art, forest.predict_proba(Xte)[:, 1]),
    ):
        d = float(np.max(np.abs(cv.Compiled(art).predict(Xte) - want)))
        if not d <= 1e-12:
            raise SystemExit(f"explain_models: FAILED: {name} artifact differs from its library by {d!r}")

    cv.write_json(os.path.join(outdir, "boosted500.json"), lgb_art)
    cv.write_json(os.path.join(outdir, "forest100.json"), f_art)
    cv.write_json(os.path.join(outdir, "rows.json"), [cv.applicant(r, NAMES) for r in Xte])
    booster.save_model(os.path.join(outdir, "boosted500.lgb.txt"))
    with open(os.path.join(outdir, "forest100.pkl"), "wb") as fh:
        pickle.dump(forest, fh, protocol=5)

    import shap

    pc = booster.predict(Xte[:N_REFERENCE], pred_contrib=True, num_threads=1)
    ex = shap.TreeExplainer(forest)
    sv = np.asarray(ex.shap_values(Xte[:N_REFERENCE]))[:, :, 1]
    ref = {
        "rows": "the first 20 entries of rows.json",
        "boosted500": {
            "source": f"LightGBM {lgb.__version__} Booster.predict(X, pred_contrib=True)",
            "space": "log_odds",
            "base_value": float(pc[0, -1]),
            "contributions": [[float(v) for v in r[:-1]] for r in pc],
        },
        "forest100": {
            "source": f"shap {shap.__version__} TreeExplainer(forest).shap_values(X)[:, :, 1]",
            "space": "probability",
            "base_value": float(np.asarray(ex.expected_value).reshape(-1)[1]),
            "contributions": [[float(v) for v in r] for r in sv],
        },
    }
    cv.write_json(os.path.join(outdir, "reference_contributions.json"), ref)

    def n_nodes(art):
        return sum(len(t["nodes"]) for t in art["model"]["trees"])

    def n_leaves(art):
        return sum(1 for t in art["model"]["trees"] for n in t["nodes"] if "value" in n)

    def max_depth(art):
        best = 0
        for t in art["model"]["trees"]:
            nodes = t["nodes"]
            stack = [(0, 0)]
            while stack:
                i, d = stack.pop()
                if "value" in nodes[i]:
                    best = max(best, d)
                else:
                    stack += [(nodes[i]["left"], d + 1), (nodes[i]["right"], d + 1)]
        return best

    results = {}
    for kind, art, lib, call in (
        (
            "boosted500",
            lgb_art,
            f"LightGBM {lgb.__version__}",
            "lightgbm.Booster(model_file=...) ; Booster.predict(X, pred_contrib=True, num_threads=1)",
        ),
        (
            "forest100",
            f_art,
            f"shap {shap.__version__} on scikit-learn {sklearn.__version__}",
            "pickle.load(forest) ; shap.TreeExplainer(forest).shap_values(X) (tree_path_dependent)",
        ),
    ):
        print(f"explain_models: timing {kind} ...", file=log)
        t = run_measure(kind, "time", outdir)
        r = run_measure(kind, "rss", outdir)
        results[kind] = {
            "artifact": f"{kind}.json",
            "library": lib,
            "calls": call,
            "method": "tree_path_dependent",
            "trees": len(art["model"]["trees"]),
            "nodes": n_nodes(art),
            "leaves": n_leaves(art),
            "max_depth": max_depth(art),
            "timing": t,
            "memory": {
                "peak_rss_kib": r["peak_rss_kib"],
                "rss_after_import_kib": r["rss_after_import_kib"],
                "what": "peak RSS (VmHWM) of a fresh process that imports the library, loads the model and explains rows.json once",
            },
        }

    timings = {
        "generated_by": "bench/explain_models.py",
        "libraries": versions(),
        "machine": {"cpu": cpu_name(), "logical_cpus": os.cpu_count(), "threads_used": 1},
        "rows": N_ROWS,
        "training": {"rows": N_TRAIN, "lightgbm_seconds": lgb_train_s, "forest_seconds": forest_train_s},
        "baseline_import_rss_kib": baseline_rss(),
        "models": results,
    }
    with open(os.path.join(outdir, "python_timings.json"), "w", encoding="utf-8") as fh:
        json.dump(timings, fh, indent=2, sort_keys=True)
        fh.write("\n")
    print(f"explain_models: wrote {outdir}", file=log)


def cpu_name():
    try:
        with open("/proc/cpuinfo", encoding="utf-8") as fh:
            for line in fh:
                if line.startswith("model name"):
                    return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or "unknown"


def summary(outdir):
    with open(os.path.join(outdir, "python_timings.json"), encoding="utf-8") as fh:
        t = json.load(fh)
    lib = t["libraries"]
    print(
        f"Python reference timings ({t['rows']} rows, 1 thread, {t['machine']['cpu']}; "
        f"python {lib['python']}, lightgbm {lib['lightgbm']}, scikit-learn {lib['scikit-learn']}, shap {lib['shap']})"
    )
    print(f"{'model':<12} {'trees':>5} {'nodes':>7} {'load ms':>9} {'batch us/row':>13} {'1-row us/call':>14} {'peak RSS MiB':>13}")
    for kind, m in t["models"].items():
        tm = m["timing"]
        load = tm.get("load_seconds_total", tm["load_seconds"]) * 1e3
        print(
            f"{kind:<12} {m['trees']:>5} {m['nodes']:>7} {load:>9.1f} {tm['batch_per_row_us_min']:>13.1f} "
            f"{tm['single_row_per_row_us']:>14.1f} {m['memory']['peak_rss_kib'] / 1024:>13.1f}"
        )
    print(f"(import-only interpreter peak RSS: {t['baseline_import_rss_kib'] / 1024:.1f} MiB; forest load includes shap.TreeExplainer init)")


if __name__ == "__main__":
    a = sys.argv[1:]
    if len(a) == 4 and a[0] == "--measure":
        measure(a[1], a[2], a[3])
    elif len(a) == 2 and a[0] == "--summary":
        summary(a[1])
    elif len(a) == 1 and not a[0].startswith("-"):
        main(a[0])
    else:
        raise SystemExit("usage: explain_models.py OUTDIR | --summary OUTDIR")
