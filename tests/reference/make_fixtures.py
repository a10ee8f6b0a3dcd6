"""Generate the TreeSHAP reference fixtures for plumbline.

usage: python tests/reference/make_fixtures.py OUTDIR

Writes OUTDIR/lightgbm.json, OUTDIR/forest.json (plumbline model artifacts) and OUTDIR/expected.json
(contributions computed by LightGBM and shap on those models). Fully seeded and single-threaded:
two runs with the same library versions give byte-identical files.

Every number written is cross-checked before anything is written:
  * a plain-Python walk of each converted artifact reproduces the library's own predictions
    (LightGBM raw score, forest predict_proba[:, 1]) to 1e-12 on every training and test row;
  * every contribution vector adds up (base_value + sum == output) to 1e-9;
  * every contribution vector equals, to 1e-9, the exact Shapley values computed here by
    enumerating all 2^6 coalitions over the artifact (cover-weighted conditional expectation for
    tree_cover_weighted (path-dependent), background average for tree_interventional).
Any failure raises and nothing is written.
"""

import os

for _v in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMEXPR_NUM_THREADS", "NUMBA_NUM_THREADS"):
    os.environ[_v] = "1"

import platform  # noqa: E402
import sys  # noqa: E402
import warnings  # noqa: E402

import lightgbm as lgb  # noqa: E402
import numpy as np  # noqa: E402
import shap  # noqa: E402
import sklearn  # noqa: E402
from sklearn.ensemble import RandomForestClassifier  # noqa: E402

sys.dont_write_bytecode = True  # keep __pycache__ out of the source tree
sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import convert as cv  # noqa: E402

SCRIPT = "tests/reference/make_fixtures.py"
SEED = 20261201
NAMES = [f"x{i}" for i in range(6)]
N_TRAIN = 3000
N_TEST = 300
N_CASE = 30
N_BACKGROUND = 40
NAN_FEATURES = (1, 3)  # x1 and x3 carry ~5% NaN in the LightGBM data
NAN_RATE = 0.05
BOUNDS = (-1000.0, 1000.0)
PRED_TOL = 1e-12  # artifact walk vs library prediction
TOL_EXACT = 1e-9  # float64 TreeSHAP (LightGBM, shap path-dependent) vs exact enumeration
TOL_SHAP_IV = 1e-6  # shap interventional (32-bit intermediates) vs exact enumeration


def fail(msg):
    raise SystemExit(f"make_fixtures: FAILED: {msg}")


def f32(a):
    """Round to the nearest float32 and back, so float32 and float64 comparisons agree."""
    return np.asarray(a, dtype=np.float64).astype(np.float32).astype(np.float64)


def make_data(rng, n):
    x0 = rng.normal(0.0, 1.0, n)
    x1 = rng.uniform(-2.0, 2.0, n)
    x2 = 0.6 * x0 + 0.8 * rng.normal(0.0, 1.0, n)
    x3 = rng.exponential(1.0, n)
    x4 = rng.normal(0.0, 1.0, n)
    x5 = rng.integers(0, 8, n).astype(np.float64)
    X = f32(np.column_stack([x0, x1, x2, x3, x4, x5]))
    x0, x1, x2, x3, x4, x5 = X.T
    logit = -3.8 + 0.9 * x0 + 0.8 * np.sin(2.0 * x1) + 0.9 * x0 * x2 - 0.6 * (x3 - 1.0) + 0.5 * (x4 > 0.5) + 0.12 * x5
    p = 1.0 / (1.0 + np.exp(-logit))
    y = (rng.uniform(0.0, 1.0, n) < p).astype(np.int64)
    return X, y


def add_nan(rng, X):
    X = X.copy()
    for j in NAN_FEATURES:
        X[rng.uniform(0.0, 1.0, X.shape[0]) < NAN_RATE, j] = np.nan
    return X


def check_close(what, got, want, tol):
    got = np.asarray(got, dtype=np.float64)
    want = np.asarray(want, dtype=np.float64)
    if got.shape != want.shape:
        fail(f"{what}: shape {got.shape} != {want.shape}")
    d = float(np.max(np.abs(got - want))) if got.size else 0.0
    if not d <= tol:
        fail(f"{what}: max abs diff {d!r} > {tol!r}")
    return d


def check_artifact_predicts(what, comp, X, want):
    """Plain-Python walk (scalar) and the vectorised walk both reproduce the library."""
    scalar = [comp.predict_row(list(map(float, row))) for row in X]
    d1 = check_close(f"{what}: plain-Python artifact walk vs library", scalar, want, PRED_TOL)
    d2 = check_close(f"{what}: vectorised artifact walk vs library", comp.predict(X), want, PRED_TOL)
    return max(d1, d2)


def check_covers(what, artifact):
    for t, tree in enumerate(artifact["model"]["trees"]):
        nodes = tree["nodes"]
        for i, n in enumerate(nodes):
            if "value" not in n:
                s = nodes[n["left"]]["cover"] + nodes[n["right"]]["cover"]
                if s != n["cover"]:
                    fail(f"{what}: tree {t} node {i} cover {n['cover']} != children {s}")


def rows_block(names, X, contrib, base, output):
    rows = []
    for i in range(X.shape[0]):
        rows.append(
            {
                "applicant": cv.applicant(X[i], names),
                "contributions": [float(c) for c in contrib[i]],
                "base_value": float(base[i]),
                "output": float(output[i]),
            }
        )
    return rows


def enumerate_exact(comp, X, method, background=None):
    """Exact Shapley values of every row by enumerating all coalitions over the artifact."""
    phis, bases = [], []
    for i in range(X.shape[0]):
        if method == "tree_cover_weighted":
            phi, v0 = comp.path_dependent_brute(X[i])
        else:
            phi, v0 = comp.interventional_brute(X[i], background)
        phis.append(phi)
        bases.append(v0)
    return np.asarray(phis, dtype=np.float64), np.asarray(bases, dtype=np.float64)


def verify_case(contrib, base, output, exact):
    """Per-row max abs difference from the exact values (contributions and base) and per-row
    additivity error |base + sum(contributions) - output|."""
    contrib = np.asarray(contrib, dtype=np.float64)
    base = np.asarray(base, dtype=np.float64)
    phi, v0 = exact
    diffs = np.maximum(np.max(np.abs(contrib - phi), axis=1), np.abs(base - v0))
    add = np.abs(base + contrib.sum(axis=1) - np.asarray(output, dtype=np.float64))
    return [float(d) for d in diffs], [float(x) for x in add]


def require(name, diffs, add, tol, rows=None):
    rows = range(len(diffs)) if rows is None else rows
    bad = [i for i in rows if not (diffs[i] <= tol and add[i] <= tol)]
    if bad:
        fail(
            f"{name}: rows {bad} differ from exact enumeration or are not additive within {tol!r} "
            f"(enumeration diffs {[diffs[i] for i in bad]}, additivity {[add[i] for i in bad]})"
        )
    return max(diffs[i] for i in rows), max(add[i] for i in rows)


def shap_values_1d(sv, cls=None):
    sv = np.asarray(sv, dtype=np.float64)
    if cls is not None:
        if sv.ndim == 3:
            return sv[:, :, cls]
        fail(f"unexpected shap value shape {sv.shape}")
    if sv.ndim != 2:
        fail(f"unexpected shap value shape {sv.shape}")
    return sv


def scalar_expected(ev, cls=None):
    ev = np.asarray(ev, dtype=np.float64).reshape(-1)
    if cls is not None:
        return float(ev[cls])
    if ev.size != 1:
        fail(f"unexpected expected_value {ev}")
    return float(ev[0])


def main(outdir):
    os.makedirs(outdir, exist_ok=True)
    versions = {
        "python": platform.python_version(),
        "numpy": np.__version__,
        "lightgbm": lgb.__version__,
        "scikit-learn": sklearn.__version__,
        "shap": shap.__version__,
    }
    warnings.filterwarnings("ignore")

    rng = np.random.default_rng(SEED)
    X_all, y_all = make_data(rng, N_TRAIN + N_TEST)
    Xtr, ytr = X_all[:N_TRAIN], y_all[:N_TRAIN]
    Xte = X_all[N_TRAIN:]
    nan_rng = np.random.default_rng(SEED + 1)
    Xtr_l = add_nan(nan_rng, Xtr)
    Xte_l = add_nan(nan_rng, Xte)
    bg_idx = np.sort(np.random.default_rng(SEED + 2).choice(N_TRAIN, N_BACKGROUND, replace=False))
    if np.any(np.abs(X_all) > BOUNDS[1]):
        fail("generated value outside feature bounds")

    # ------------------------------------------------------------------ LightGBM
    params = {
        "objective": "binary",
        "num_leaves": 16,
        "max_depth": 5,
        "learning_rate": 0.1,
        "min_data_in_leaf": 20,
        "num_threads": 1,
        "deterministic": True,
        "force_row_wise": True,
        "seed": SEED,
        "verbose": -1,
    }
    booster = lgb.train(params, lgb.Dataset(Xtr_l, ytr, feature_name=NAMES, free_raw_data=False), num_boost_round=40)
    dump = booster.dump_model()
    if any("split_index" not in t["tree_structure"] for t in dump["tree_info"]):
        fail("LightGBM produced a single-leaf tree; the fixture expects none")
    mtypes = cv.lightgbm_missing_types(dump)
    for j, name in enumerate(NAMES):
        want = "NaN" if j in NAN_FEATURES else "None"
        seen = {s.split("/")[0] for s in mtypes.get(name, set())}
        if seen and seen != {want}:
            fail(f"LightGBM missing types for {name}: {sorted(mtypes[name])}, expected {want}")
    lgb_trees = cv.lightgbm_trees(dump, NAMES, N_TRAIN)
    lgb_art = cv.make_artifact(
        model_id="reference-lightgbm",
        description="Reference LightGBM binary model on generated data (TreeSHAP fixtures; not a credit model)",
        producer=f"{SCRIPT} (lightgbm {lgb.__version__})",
        feature_names=NAMES,
        bounds=BOUNDS,
        aggregation="sum_log_odds",
        trees=lgb_trees,
        background=Xtr_l[bg_idx],
        reference_label="training rows (generated)",
        provenance={
            "generator": SCRIPT,
            "seed": SEED,
            "training_rows": N_TRAIN,
            "base_rate": float(ytr.mean()),
            "library": f"lightgbm {lgb.__version__}",
            "params": {k: v for k, v in params.items() if k != "verbose"} | {"num_boost_round": 40},
            "nan_features": [NAMES[j] for j in NAN_FEATURES],
            "nan_rate": NAN_RATE,
        },
    )
    check_covers("lightgbm", lgb_art)
    lgb_comp = cv.Compiled(lgb_art)

    # Fixture rows: the first N_CASE test rows, with hand-placed missing values and a value lying
    # exactly on a split threshold.
    Xc = Xte_l[:N_CASE].copy()
    Xc[0, 1] = np.nan  # NaN-trained feature
    Xc[1, 3] = np.nan  # NaN-trained feature
    Xc[2, [1, 3]] = np.nan
    Xc[3, 0] = np.nan  # feature with no NaN in training: LightGBM treats NaN as 0.0
    Xc[4, [2, 4]] = np.nan
    Xc[5, :] = np.nan
    root = lgb_trees[0]["nodes"][0]
    Xc[6, NAMES.index(root["column"])] = root["threshold"]  # exactly on the root threshold: goes left

    X_check = np.vstack([Xtr_l, Xte_l, Xc])
    raw_check = booster.predict(X_check, raw_score=True, num_threads=1)
    lgb_pred_diff = check_artifact_predicts("lightgbm", lgb_comp, X_check, raw_check)

    raw_c = booster.predict(Xc, raw_score=True, num_threads=1)
    bg_l = Xtr_l[bg_idx]
    exact_pd = enumerate_exact(lgb_comp, Xc, "tree_cover_weighted")
    exact_iv = enumerate_exact(lgb_comp, Xc, "tree_interventional", bg_l)
    all_rows = list(range(N_CASE))

    pc = booster.predict(Xc, pred_contrib=True, num_threads=1)
    pc_contrib, pc_base = pc[:, :-1], pc[:, -1]
    d_pc, add_pc = verify_case(pc_contrib, pc_base, raw_c, exact_pd)
    chk_pc = require("lightgbm_pred_contrib", d_pc, add_pc, TOL_EXACT)

    ex_pd = shap.TreeExplainer(booster)
    sv_pd = shap_values_1d(ex_pd.shap_values(Xc))
    ev_pd = np.full(N_CASE, scalar_expected(ex_pd.expected_value))
    d_spd, add_spd = verify_case(sv_pd, ev_pd, raw_c, exact_pd)
    chk_spd = require("lightgbm_shap_path_dependent", d_spd, add_spd, TOL_EXACT)
    check_close("shap path-dependent vs LightGBM pred_contrib", sv_pd, pc_contrib, TOL_EXACT)

    ex_iv = shap.TreeExplainer(booster, data=bg_l, feature_perturbation="interventional", model_output="raw")
    sv_iv = shap_values_1d(ex_iv.shap_values(Xc, check_additivity=False))
    ev_iv = np.full(N_CASE, scalar_expected(ex_iv.expected_value))
    d_siv, add_siv = verify_case(sv_iv, ev_iv, raw_c, exact_iv)
    bad_iv = [i for i in all_rows if not (d_siv[i] <= TOL_SHAP_IV and add_siv[i] <= TOL_SHAP_IV)]
    nan_none_rows = [i for i in all_rows if any(np.isnan(Xc[i, j]) for j in range(6) if j not in NAN_FEATURES)]
    if not set(bad_iv) <= set(nan_none_rows):
        fail(
            f"shap interventional disagrees with exact enumeration on rows {sorted(set(bad_iv) - set(nan_none_rows))} "
            "(not explained by NaN handling)"
        )
    keep_iv = [i for i in all_rows if i not in bad_iv]
    chk_siv = require("lightgbm_shap_interventional", d_siv, add_siv, TOL_SHAP_IV, keep_iv)
    d_eiv, add_eiv = verify_case(exact_iv[0], exact_iv[1], raw_c, exact_iv)
    chk_eiv = require("lightgbm_exact_interventional", d_eiv, add_eiv, TOL_EXACT)

    def none_sides():
        out = []
        for j, name in enumerate(NAMES):
            if j in NAN_FEATURES:
                continue
            n_split = n_diff = 0

            def walk(node):
                nonlocal n_split, n_diff
                if "split_index" in node:
                    if node["split_feature"] == j:
                        n_split += 1
                        lightgbm_left = 0.0 <= node["threshold"]
                        if bool(node["default_left"]) != lightgbm_left:
                            n_diff += 1
                    walk(node["left_child"])
                    walk(node["right_child"])

            for t in dump["tree_info"]:
                walk(t["tree_structure"])
            out.append(f"{name}: {n_diff} of {n_split}")
        return ", ".join(out)

    lgb_notes_common = (
        f"LightGBM trained with ~{int(NAN_RATE * 100)}% NaN in {NAMES[NAN_FEATURES[0]]} and {NAMES[NAN_FEATURES[1]]} "
        "(missing_type NaN: missing goes to default_left); the other features saw no NaN (missing_type None: "
        "LightGBM replaces NaN by 0.0, so missing goes left iff 0.0 <= threshold). Rows (numbered from 0): row 3 has x0 missing, row 4 x2 and "
        "x4, row 5 every feature; row 6 lies exactly on tree 0's root threshold."
    )
    lgb_iv_note = (
        "shap's own tree walk sends NaN to default_left at every split, ignoring LightGBM's missing_type None "
        f"rule (splits where default_left disagrees with LightGBM's NaN-as-0.0 routing: {none_sides()}). "
        f"Rows with NaN in a feature that had no NaN in training are therefore left out here: test rows {bad_iv} "
        "of the pred_contrib case. NaN in x1/x3 (missing_type NaN) agrees and is kept."
        if bad_iv
        else "No row was left out: shap agrees with exact enumeration on every row, including NaN rows."
    )

    # ------------------------------------------------------------------ random forest
    forest = RandomForestClassifier(n_estimators=25, max_depth=6, random_state=SEED % (2**31), n_jobs=1)
    forest.fit(Xtr, ytr)
    f_trees = cv.forest_trees(forest, NAMES)
    f_art = cv.make_artifact(
        model_id="reference-forest",
        description="Reference scikit-learn random forest on generated data (TreeSHAP fixtures; not a credit model)",
        producer=f"{SCRIPT} (scikit-learn {sklearn.__version__})",
        feature_names=NAMES,
        bounds=BOUNDS,
        aggregation="mean_probability",
        trees=f_trees,
        background=Xtr[bg_idx],
        reference_label="training rows (generated)",
        provenance={
            "generator": SCRIPT,
            "seed": SEED,
            "training_rows": N_TRAIN,
            "base_rate": float(ytr.mean()),
            "library": f"scikit-learn {sklearn.__version__}",
            "params": {"n_estimators": 25, "max_depth": 6, "random_state": SEED % (2**31)},
        },
    )
    check_covers("forest", f_art)
    f_comp = cv.Compiled(f_art)
    Xf_check = np.vstack([Xtr, Xte])
    f_pred_diff = check_artifact_predicts("forest", f_comp, Xf_check, forest.predict_proba(Xf_check)[:, 1])
    # NaN routing (tree_.missing_go_to_left) against sklearn's own predict, on rows not in the fixture.
    Xf_nan = add_nan(np.random.default_rng(SEED + 3), Xte)
    Xf_nan[:20, :] = np.nan
    f_nan_diff = check_artifact_predicts("forest (NaN inputs)", f_comp, Xf_nan, forest.predict_proba(Xf_nan)[:, 1])

    Xfc = Xte[:N_CASE]
    bg_f = Xtr[bg_idx]
    prob_c = forest.predict_proba(Xfc)[:, 1]
    exactf_pd = enumerate_exact(f_comp, Xfc, "tree_cover_weighted")
    exactf_iv = enumerate_exact(f_comp, Xfc, "tree_interventional", bg_f)

    exf_pd = shap.TreeExplainer(forest)
    svf_pd = shap_values_1d(exf_pd.shap_values(Xfc), cls=1)
    evf_pd = np.full(N_CASE, scalar_expected(exf_pd.expected_value, cls=1))
    d_fpd, add_fpd = verify_case(svf_pd, evf_pd, prob_c, exactf_pd)
    chk_fpd = require("forest_shap_path_dependent", d_fpd, add_fpd, TOL_EXACT)

    exf_iv = shap.TreeExplainer(forest, data=bg_f, feature_perturbation="interventional", model_output="raw")
    svf_iv = shap_values_1d(exf_iv.shap_values(Xfc, check_additivity=False), cls=1)
    evf_iv = np.full(N_CASE, scalar_expected(exf_iv.expected_value, cls=1))
    d_fiv, add_fiv = verify_case(svf_iv, evf_iv, prob_c, exactf_iv)
    chk_fiv = require("forest_shap_interventional", d_fiv, add_fiv, TOL_SHAP_IV)
    d_feiv, add_feiv = verify_case(exactf_iv[0], exactf_iv[1], prob_c, exactf_iv)
    chk_feiv = require("forest_exact_interventional", d_feiv, add_feiv, TOL_EXACT)

    # ------------------------------------------------------------------ write
    def checked(chk):
        d, add = chk
        return (
            f"make_fixtures.py checked every row: contributions and base_value within {d:.1e} of exact Shapley "
            f"values from enumerating all 64 coalitions over the artifact; base_value + sum(contributions) "
            f"within {add:.1e} of output."
        )

    ver = versions
    f32_note = (
        "shap's interventional TreeSHAP agrees with exact enumeration only to about 1e-7: its C extension "
        "(tree_shap_indep) keeps thresholds and intermediate sums in 32-bit floats. Compare with the tolerance "
        "given; the *_exact_interventional case holds float64 reference values for the same rows."
    )
    bg_src = "BACKGROUND = the artifact's explanation.background rows"
    cases = [
        {
            "name": "lightgbm_pred_contrib",
            "artifact": "lightgbm.json",
            "method": "tree_cover_weighted",
            "space": "log_odds",
            "source": f"LightGBM {ver['lightgbm']} Booster.predict(X, pred_contrib=True)",
            "tolerance": TOL_EXACT,
            "notes": lgb_notes_common + " " + checked(chk_pc),
            "rows": rows_block(NAMES, Xc, pc_contrib, pc_base, raw_c),
        },
        {
            "name": "lightgbm_shap_path_dependent",
            "artifact": "lightgbm.json",
            "method": "tree_cover_weighted",
            "space": "log_odds",
            "source": f"shap {ver['shap']} TreeExplainer(booster).shap_values(X) (feature_perturbation tree_path_dependent)",
            "tolerance": TOL_EXACT,
            "notes": (
                "For a LightGBM Booster without background data, shap's tree_path_dependent path calls LightGBM's "
                "Booster.predict(pred_contrib=True) itself, so this case equals lightgbm_pred_contrib (checked). "
                + lgb_notes_common
                + " "
                + checked(chk_spd)
            ),
            "rows": rows_block(NAMES, Xc, sv_pd, ev_pd, raw_c),
        },
        {
            "name": "lightgbm_shap_interventional",
            "artifact": "lightgbm.json",
            "method": "tree_interventional",
            "space": "log_odds",
            "source": (
                f"shap {ver['shap']} TreeExplainer(booster, data=BACKGROUND, feature_perturbation=\"interventional\", "
                f"model_output=\"raw\").shap_values(X); {bg_src}"
            ),
            "tolerance": TOL_SHAP_IV,
            "notes": lgb_iv_note + " " + f32_note + " " + checked(chk_siv),
            "rows": rows_block(NAMES, Xc[keep_iv], sv_iv[keep_iv], ev_iv[keep_iv], raw_c[keep_iv]),
        },
        {
            "name": "lightgbm_exact_interventional",
            "artifact": "lightgbm.json",
            "method": "tree_interventional",
            "space": "log_odds",
            "source": (
                "make_fixtures.py: exact Shapley values (float64) by enumerating all 64 coalitions of "
                f"v(S) = mean over BACKGROUND of f(x_S, b_rest), f walked on the artifact; {bg_src}"
            ),
            "tolerance": TOL_EXACT,
            "notes": (
                "All rows of lightgbm_pred_contrib, including those left out of lightgbm_shap_interventional; missing "
                "values follow the artifact's per-node missing side (LightGBM's own routing). "
                + checked(chk_eiv)
            ),
            "rows": rows_block(NAMES, Xc, exact_iv[0], exact_iv[1], raw_c),
        },
        {
            "name": "forest_shap_path_dependent",
            "artifact": "forest.json",
            "method": "tree_cover_weighted",
            "space": "probability",
            "source": f"shap {ver['shap']} TreeExplainer(forest).shap_values(X)[:, :, 1] (class 1)",
            "tolerance": TOL_EXACT,
            "notes": "No missing values in the forest's data or rows. " + checked(chk_fpd),
            "rows": rows_block(NAMES, Xfc, svf_pd, evf_pd, prob_c),
        },
        {
            "name": "forest_shap_interventional",
            "artifact": "forest.json",
            "method": "tree_interventional",
            "space": "probability",
            "source": (
                f"shap {ver['shap']} TreeExplainer(forest, data=BACKGROUND, feature_perturbation=\"interventional\", "
                f"model_output=\"raw\").shap_values(X)[:, :, 1] (class 1); {bg_src}"
            ),
            "tolerance": TOL_SHAP_IV,
            "notes": "No missing values in the forest's data or rows. " + f32_note + " " + checked(chk_fiv),
            "rows": rows_block(NAMES, Xfc, svf_iv, evf_iv, prob_c),
        },
        {
            "name": "forest_exact_interventional",
            "artifact": "forest.json",
            "method": "tree_interventional",
            "space": "probability",
            "source": (
                "make_fixtures.py: exact Shapley values (float64) by enumerating all 64 coalitions of "
                f"v(S) = mean over BACKGROUND of f(x_S, b_rest), f walked on the artifact; {bg_src}"
            ),
            "tolerance": TOL_EXACT,
            "notes": "Same rows as forest_shap_interventional. " + checked(chk_feiv),
            "rows": rows_block(NAMES, Xfc, exactf_iv[0], exactf_iv[1], prob_c),
        },
    ]
    expected = {"generated_by": SCRIPT, "libraries": versions, "cases": cases}

    cv.write_json(os.path.join(outdir, "lightgbm.json"), lgb_art)
    cv.write_json(os.path.join(outdir, "forest.json"), f_art)
    cv.write_json(os.path.join(outdir, "expected.json"), expected)

    log = sys.stderr
    print(f"make_fixtures: {len(lgb_trees)} LightGBM trees, {len(f_trees)} forest trees", file=log)
    print(
        f"make_fixtures: artifact walk vs library predictions, max abs diff: lightgbm {lgb_pred_diff:.1e}, "
        f"forest {f_pred_diff:.1e}, forest with NaN inputs {f_nan_diff:.1e}",
        file=log,
    )
    for name, chk in (
        ("lightgbm_pred_contrib", chk_pc),
        ("lightgbm_shap_path_dependent", chk_spd),
        ("lightgbm_shap_interventional", chk_siv),
        ("lightgbm_exact_interventional", chk_eiv),
        ("forest_shap_path_dependent", chk_fpd),
        ("forest_shap_interventional", chk_fiv),
        ("forest_exact_interventional", chk_feiv),
    ):
        print(f"make_fixtures: {name}: vs enumeration {chk[0]:.1e}, additivity {chk[1]:.1e}", file=log)
    print(f"make_fixtures: rows left out of lightgbm_shap_interventional: {bad_iv}", file=log)
    print(f"make_fixtures: LightGBM missing types per feature: { {k: sorted(v) for k, v in sorted(mtypes.items())} }", file=log)
    print(f"make_fixtures: ok, wrote {outdir}", file=log)


if __name__ == "__main__":
    if len(sys.argv) != 2:
        raise SystemExit("usage: make_fixtures.py OUTDIR")
    main(sys.argv[1])
