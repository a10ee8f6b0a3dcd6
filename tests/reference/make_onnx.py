"""Generate the ONNX import fixtures for plumbline.

usage: python tests/reference/make_onnx.py OUTDIR

Writes OUTDIR/onnx/:
  *.onnx            models trained here on generated data and exported by the pinned skl2onnx and
                    onnxmltools (scikit-learn RandomForest / ExtraTrees / GradientBoosting /
                    HistGradientBoosting / LogisticRegression behind a StandardScaler, LightGBM,
                    XGBoost), and small graphs built with onnx.helper that import must refuse;
  complete.csv,     the training rows each model is imported with (the reference CSV; the second
  missing.csv       has about 5% empty cells in x1 and x3);
  spec.json,        training specs for them (x1 and x3 tree_default in the second);
  spec_missing.json
  expected.json     per case: onnxruntime's probability of default on test rows, and the exact
                    contributions of the model's own library (shap TreeExplainer path-dependent,
                    LightGBM pred_contrib, XGBoost pred_contribs, shap LinearExplainer); rows at
                    and one float32 step either side of every threshold of four models, with
                    onnxruntime's probabilities; and the refusals with the words they must name.

Seeded and single-threaded; byte-identical across runs with the same library versions. Nothing here
is a credit model: x0..x5 are generated numbers.
"""

import os

for _v in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMEXPR_NUM_THREADS", "NUMBA_NUM_THREADS"):
    os.environ[_v] = "1"

import platform  # noqa: E402
import sys  # noqa: E402
import warnings  # noqa: E402

import lightgbm as lgb  # noqa: E402
import numpy as np  # noqa: E402
import onnx  # noqa: E402
import onnxmltools  # noqa: E402
import onnxruntime as ort  # noqa: E402
import shap  # noqa: E402
import skl2onnx  # noqa: E402
import sklearn  # noqa: E402
import xgboost as xgb  # noqa: E402
from onnx import TensorProto, helper  # noqa: E402
from onnxmltools.convert.common.data_types import FloatTensorType  # noqa: E402
from sklearn.ensemble import (  # noqa: E402
    ExtraTreesClassifier,
    GradientBoostingClassifier,
    HistGradientBoostingClassifier,
    RandomForestClassifier,
)
from sklearn.linear_model import LogisticRegression  # noqa: E402
from sklearn.pipeline import make_pipeline  # noqa: E402
from sklearn.preprocessing import StandardScaler  # noqa: E402

sys.dont_write_bytecode = True
sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import convert as cv  # noqa: E402

SEED = 20261202
NAMES = [f"x{i}" for i in range(6)]
N_TRAIN = 2000
N_TEST = 40
NAN_FEATURES = (1, 3)
OPSET = {"": 17, "ai.onnx.ml": 3}
EDGE_TREES = 3  # trees whose every split is probed at and beside its threshold
N_BACKGROUND = 50  # explicit explanation background of the graph models
N_GRAPH_ROWS = 20  # test rows explained by shap's Exact explainer


def fail(msg):
    raise SystemExit(f"make_onnx: FAILED: {msg}")


def f32(a):
    return np.asarray(a, dtype=np.float64).astype(np.float32).astype(np.float64)


def make_data(rng, n):
    x0 = rng.normal(0.0, 1.0, n)
    x1 = rng.uniform(-2.0, 2.0, n)
    x2 = 0.5 * x0 + 0.9 * rng.normal(0.0, 1.0, n)
    x3 = rng.exponential(1.0, n)
    x4 = rng.normal(0.0, 1.0, n)
    x5 = rng.integers(0, 6, n).astype(np.float64)
    X = f32(np.column_stack([x0, x1, x2, x3, x4, x5]))
    x0, x1, x2, x3, x4, x5 = X.T
    logit = -2.6 + 0.9 * x0 + 0.7 * np.sin(2.0 * x1) + 0.6 * x0 * x2 - 0.5 * (x3 - 1.0) + 0.4 * (x4 > 0.3) + 0.1 * x5
    y = (rng.uniform(0.0, 1.0, n) < 1.0 / (1.0 + np.exp(-logit))).astype(np.int64)
    return X, y


def with_nan(rng, X):
    X = X.copy()
    for j in NAN_FEATURES:
        X[rng.uniform(0.0, 1.0, X.shape[0]) < 0.05, j] = np.nan
    return X


def write_csv(path, X, y):
    with open(path, "w", encoding="utf-8", newline="\n") as f:
        f.write(",".join(NAMES) + ",defaulted\n")
        for row, t in zip(X, y):
            cells = ["" if np.isnan(v) else repr(float(v)) for v in row]
            f.write(",".join(cells) + f",{int(t)}\n")


def spec(missing_fields=()):
    def field(i, name):
        missing = {"policy": "tree_default"} if i in missing_fields else {"policy": "reject"}
        return {"name": name, "kind": "number", "missing": missing, "reason": name.upper()}

    return {
        "model_id": "onnx-fixture",
        "version": "1.0.0",
        "description": "Generated reference model for the ONNX import tests; not a credit model",
        "created_at": "2026-12-02T00:00:00Z",
        "score_provider": "plumbline test fixtures (generated data)",
        "target": "defaulted",
        "kind": "forest",
        "features": [field(i, n) for i, n in enumerate(NAMES)],
        "reasons": [{"code": n.upper(), "text": f"Generated input {n} moved the estimate towards default"} for n in NAMES],
        "policy": {"approve_below": 0.15, "decline_at_or_above": 0.35, "scaling": {"points": 600, "odds": 50, "pdo": 20, "min_score": 300, "max_score": 850}},
        "reference": {"population": "all_applicants", "label": "All generated reference rows", "alternate": False},
    }


def session(model):
    options = ort.SessionOptions()
    options.log_severity_level = 3  # the exporters' fixed label shapes draw warnings, not errors
    return ort.InferenceSession(model.SerializeToString(), options, providers=["CPUExecutionProvider"])


def ort_probability(model, X):
    """onnxruntime's probability of class 1, X cast to the model's input type as a caller would."""
    s = session(model)
    inp = s.get_inputs()[0]
    dtype = np.float64 if inp.type == "tensor(double)" else np.float32
    outs = s.run(None, {inp.name: np.asarray(X, dtype=dtype)})
    names = [o.name for o in s.get_outputs()]
    prob = outs[1] if len(outs) > 1 else outs[0]
    if isinstance(prob, list):  # ZipMap
        return np.array([float(m[1]) for m in prob]), names
    prob = np.asarray(prob, dtype=np.float64)
    return (prob[:, 1] if prob.ndim == 2 and prob.shape[1] == 2 else prob.reshape(-1)), names


def check_close(what, got, want, tol):
    d = float(np.max(np.abs(np.asarray(got, dtype=np.float64) - np.asarray(want, dtype=np.float64))))
    if not d <= tol:
        fail(f"{what}: max abs diff {d!r} > {tol!r}")
    return d


# --- a plain walk of an exported tree ensemble, to find rows that reach each split -----------

def onnx_trees(model):
    node = next(n for n in model.graph.node if n.op_type.startswith("TreeEnsemble"))
    a = {x.name: helper.get_attribute_value(x) for x in node.attribute}
    values = a.get("nodes_values")
    if values is None:
        values = onnx.numpy_helper.to_array(a["nodes_values_as_tensor"]).tolist()
    trees = {}
    for i, t in enumerate(a["nodes_treeids"]):
        trees.setdefault(t, {})[a["nodes_nodeids"][i]] = {
            "mode": a["nodes_modes"][i].decode(),
            "feature": a["nodes_featureids"][i],
            "value": float(values[i]),
            "yes": a["nodes_truenodeids"][i],
            "no": a["nodes_falsenodeids"][i],
            "missing_yes": bool(a.get("nodes_missing_value_tracks_true", [0] * len(values))[i]),
        }
    return [trees[t] for t in sorted(trees)]


def scaled_view(r):
    """What trees behind the Scaler compare: onnxruntime's float32 (x - offset) * scale."""
    r32 = np.asarray(r, dtype=np.float32)
    return ((r32 - np.float32(SCALER["offset"])) * np.float32(SCALER["scale"])).astype(np.float32).astype(np.float64)


def edge_rows(model, X, scaled):
    """For each split of the first trees: a row reaching it, with the split's input set to values
    at and around the threshold (float32 neighbours, the float64 midpoints between them and the
    float64 values next to those midpoints; float64 neighbours for a double model)."""
    view = scaled_view if scaled else (lambda r: r)
    rows = []
    probed = skipped = 0
    for tree in onnx_trees(model)[:EDGE_TREES]:
        for nid, n in tree.items():
            if n["mode"] == "LEAF":
                continue
            reach = None
            for r in X:
                cur = 0
                while tree[cur]["mode"] != "LEAF" and cur != nid:
                    m = tree[cur]
                    v = view(r)[m["feature"]]
                    t = m["value"]
                    ok = {"BRANCH_LEQ": v <= t, "BRANCH_LT": v < t, "BRANCH_GTE": v >= t, "BRANCH_GT": v > t}[m["mode"]]
                    cur = m["yes"] if (ok or (np.isnan(v) and m["missing_yes"])) else m["no"]
                if cur == nid:
                    reach = r
                    break
            if reach is None:
                continue
            group = []
            for x in probes(n["value"], model_input_is_double(model), scaled, n):
                r = reach.copy()
                r[n["feature"]] = x
                group.append(r)
            # The probes must straddle the split: onnxruntime gives two outputs across them. A
            # split whose two sides score this row alike (equal leaves) proves nothing; skipped.
            probed += 1
            if len(set(ort_probability(model, np.array(group))[0].tolist())) < 2:
                skipped += 1
                continue
            rows.extend(group)
    if skipped * 10 > probed:
        fail(f"{skipped} of {probed} probed splits do not change onnxruntime's output")
    return np.array(rows)


def model_input_is_double(model):
    return model.graph.input[0].type.tensor_type.elem_type == TensorProto.DOUBLE


SCALER = {}


def probes(t, double, scaled, n):
    """Input values at and around threshold t (through the Scaler when `scaled`)."""
    if scaled:
        off, sc = SCALER["offset"][n["feature"]], SCALER["scale"][n["feature"]]
        centre = np.float32(np.float32(t) / np.float32(sc) + np.float32(off))
    else:
        centre = np.float64(t) if double else np.float32(t)
    out = []
    if double:
        v = centre
        for _ in range(3):
            v = np.nextafter(v, -np.inf)
        for _ in range(7):
            out.append(float(v))
            v = np.nextafter(v, np.inf)
        return out
    v = np.float32(centre)
    for _ in range(3):
        v = np.nextafter(v, np.float32(-np.inf))
    for _ in range(6):
        lo, hi = float(v), float(np.nextafter(v, np.float32(np.inf)))
        mid = (lo + hi) / 2.0
        out.extend([lo, float(np.nextafter(mid, -np.inf)), mid, float(np.nextafter(mid, np.inf))])
        v = np.nextafter(v, np.float32(np.inf))
    return out


# --- refusals: small graphs built by hand ------------------------------------------------------

def tree_node(**over):
    attrs = dict(
        nodes_treeids=[0, 0, 0], nodes_nodeids=[0, 1, 2], nodes_featureids=[0, 0, 0],
        nodes_modes=["BRANCH_LEQ", "LEAF", "LEAF"], nodes_values=[0.5, 0.0, 0.0],
        nodes_truenodeids=[1, 0, 0], nodes_falsenodeids=[2, 0, 0],
        class_treeids=[0, 0], class_nodeids=[1, 2], class_ids=[0, 0], class_weights=[-0.3, 0.4],
        classlabels_int64s=[0, 1], post_transform="LOGISTIC",
    )
    attrs.update(over)
    return attrs


def graph_model(nodes, inputs=("X",), width=6, outputs=None, initializers=()):
    ins = [helper.make_tensor_value_info(i, TensorProto.FLOAT, [None, width]) for i in inputs]
    outs = outputs or [
        helper.make_tensor_value_info("label", TensorProto.INT64, [None]),
        helper.make_tensor_value_info("probabilities", TensorProto.FLOAT, [None, 2]),
    ]
    g = helper.make_graph(nodes, "refusal", ins, outs, initializer=list(initializers))
    m = helper.make_model(g, producer_name="make_onnx.py", ir_version=9,
                          opset_imports=[helper.make_opsetid("", 17), helper.make_opsetid("ai.onnx.ml", 3)])
    return m


def classifier(x="X", **over):
    return helper.make_node("TreeEnsembleClassifier", [x], ["label", "probabilities"], domain="ai.onnx.ml", **tree_node(**over))


def refusals():
    """(name, model, spec file, reference csv, words the error must contain)."""
    three = tree_node(class_ids=[0, 1], class_weights=[0.3, 0.4], classlabels_int64s=[0, 1, 2], post_transform="SOFTMAX")
    del three["class_treeids"], three["class_nodeids"]
    three.update(class_treeids=[0, 0], class_nodeids=[1, 2])
    cases = [
        ("multiclass", graph_model([helper.make_node("TreeEnsembleClassifier", ["X"], ["label", "probabilities"], domain="ai.onnx.ml", **three)]),
         ["classlabels_int64s", "3 classes", "binary"]),
        ("categorical_split", graph_model([classifier(nodes_modes=["BRANCH_EQ", "LEAF", "LEAF"])]),
         ["nodes_modes", "BRANCH_EQ", "categorical"]),
        ("unknown_operator", graph_model([helper.make_node("Abs", ["X"], ["A"]), classifier(x="A")]),
         ["Abs", "not an operator plumbline reads"]),
        ("two_inputs", graph_model([classifier()], inputs=("X", "Y")),
         ["2 inputs", "X, Y"]),
        ("missing_child", graph_model([classifier(nodes_truenodeids=[7, 0, 0])]),
         ["nodes_truenodeids", "child 7 does not exist"]),
        ("weights_for_both_classes", graph_model([classifier(class_treeids=[0, 0, 0, 0], class_nodeids=[1, 2, 1, 2], class_ids=[0, 0, 1, 1], class_weights=[0.1, 0.2, 0.3, 0.4], base_values=[0.1, 0.2])]),
         ["class_ids", "single-score form"]),
        ("labels_not_0_1", graph_model([classifier(classlabels_int64s=[3, 7])]),
         ["classlabels_int64s", "0 and 1"]),
        ("probit", graph_model([classifier(post_transform="PROBIT")]),
         ["post_transform", "PROBIT"]),
        ("negative_probability_leaf", graph_model([classifier(post_transform="NONE")]),
         ["class_weights", "[0, 1]"]),
        ("nan_threshold", graph_model([classifier(nodes_values=[float("nan"), 0.0, 0.0])]),
         ["nodes_values", "NaN threshold"]),
        ("shared_child", graph_model([classifier(
            nodes_treeids=[0, 0, 0, 0], nodes_nodeids=[0, 1, 2, 3], nodes_featureids=[0, 1, 0, 0],
            nodes_modes=["BRANCH_LEQ", "BRANCH_LEQ", "LEAF", "LEAF"], nodes_values=[0.5, 0.5, 0.0, 0.0],
            nodes_truenodeids=[1, 2, 0, 0], nodes_falsenodeids=[2, 3, 0, 0], class_nodeids=[2, 3])]),
         ["reached twice"]),
        ("argmax_output", graph_model(
            [classifier(), helper.make_node("ArgMax", ["probabilities"], ["top"], axis=1)],
            outputs=[helper.make_tensor_value_info("top", TensorProto.INT64, [None, 1])]),
         ["ArgMax", "between the model and its outputs"]),
        ("not_onnx", b"plumbline: this is not a protobuf model", ["not an ONNX model"]),
    ]
    return cases


# --- the cases -------------------------------------------------------------------------------

def main(outdir):
    out = os.path.join(outdir, "onnx")
    os.makedirs(out, exist_ok=True)
    warnings.filterwarnings("ignore")
    versions = {
        "python": platform.python_version(), "numpy": np.__version__, "scikit-learn": sklearn.__version__,
        "lightgbm": lgb.__version__, "xgboost": xgb.__version__, "shap": shap.__version__,
        "skl2onnx": skl2onnx.__version__, "onnxmltools": onnxmltools.__version__,
        "onnx": onnx.__version__, "onnxruntime": ort.__version__,
    }
    rng = np.random.default_rng(SEED)
    X_all, y_all = make_data(rng, N_TRAIN + N_TEST)
    Xtr, ytr, Xte = X_all[:N_TRAIN], y_all[:N_TRAIN], X_all[N_TRAIN:]
    nan_rng = np.random.default_rng(SEED + 1)
    Xtr_m, Xte_m = with_nan(nan_rng, Xtr), with_nan(nan_rng, Xte)
    write_csv(os.path.join(out, "complete.csv"), Xtr, ytr)
    write_csv(os.path.join(out, "missing.csv"), Xtr_m, ytr)
    cv.write_json(os.path.join(out, "spec.json"), spec())
    cv.write_json(os.path.join(out, "spec_missing.json"), spec(NAN_FEATURES))
    X32, X32m = Xtr.astype(np.float32), Xtr_m.astype(np.float32)

    cases, edges, log = [], [], []

    def save(name, model):
        path = os.path.join(out, f"{name}.onnx")
        with open(path, "wb") as f:
            f.write(model if isinstance(model, bytes) else model.SerializeToString())
        return f"{name}.onnx"

    def case(name, model, Xt, lib_prob, contrib, base, source, space, missing=False, covers="rows"):
        p, outputs = ort_probability(model, Xt)
        # The library's own probabilities agree with onnxruntime's to float32 accuracy.
        d = check_close(f"{name}: onnxruntime vs library probabilities", p, lib_prob, 2e-6)
        contrib = np.asarray(contrib, dtype=np.float64)
        rows = []
        for i in range(Xt.shape[0]):
            rows.append({
                "applicant": cv.applicant(Xt[i], NAMES), "onnxruntime": float(p[i]),
                "contributions": [float(c) for c in contrib[i]], "base_value": float(base),
            })
        cases.append({
            "name": name, "model": save(name, model), "spec": "spec_missing.json" if missing else "spec.json",
            "reference": "missing.csv" if missing else "complete.csv", "covers": covers, "space": space,
            "contribution_source": source, "outputs": outputs, "rows": rows,
        })
        log.append(f"{name}: onnxruntime vs library probability {d:.1e}")

    def edge(name, model, scaled=False, missing=False, covers="rows"):
        X = Xtr_m if missing else Xtr
        rows = edge_rows(model, X, scaled)
        p, _ = ort_probability(model, rows)
        edges.append({
            "name": name, "model": f"{name}.onnx", "spec": "spec_missing.json" if missing else "spec.json",
            "reference": "missing.csv" if missing else "complete.csv", "covers": covers,
            "rows": [{"applicant": cv.applicant(r, NAMES), "onnxruntime": float(v)} for r, v in zip(rows, p)],
        })
        log.append(f"{name}: {len(rows)} rows at and beside thresholds")

    def sk_onnx(model, X, **kw):
        opts = {id(model): {"zipmap": False}} if kw.pop("nozip", True) else None
        return skl2onnx.to_onnx(model, X[:1], options=opts, target_opset=OPSET, **kw)

    # scikit-learn forests, trained without bootstrap so training rows are the covers shap uses.
    for name, cls in (("random_forest", RandomForestClassifier), ("extra_trees", ExtraTreesClassifier)):
        m = cls(n_estimators=20, max_depth=6, bootstrap=False, max_features=0.5, random_state=SEED, n_jobs=1).fit(X32, ytr)
        ex = shap.TreeExplainer(m)
        sv = np.asarray(ex.shap_values(Xte), dtype=np.float64)[:, :, 1]
        case(name, sk_onnx(m, X32), Xte, m.predict_proba(Xte)[:, 1], sv, float(np.asarray(ex.expected_value).reshape(-1)[1]),
             f"shap {shap.__version__} TreeExplainer({cls.__name__}), path-dependent, class 1", "probability")

    gb = GradientBoostingClassifier(n_estimators=30, max_depth=3, learning_rate=0.1, random_state=SEED).fit(X32, ytr)
    ex = shap.TreeExplainer(gb)
    gb_onnx = sk_onnx(gb, X32)
    case("gradient_boosting", gb_onnx, Xte, gb.predict_proba(Xte)[:, 1], ex.shap_values(Xte), float(np.asarray(ex.expected_value).reshape(-1)[0]),
         f"shap {shap.__version__} TreeExplainer(GradientBoostingClassifier), path-dependent, log-odds", "log_odds")
    edge("gradient_boosting", gb_onnx)

    # Every node mode (BRANCH_LEQ, LT, GTE, GT) with missing values tracked to either side: the
    # gradient boosting export with its modes and missing flags rewritten (a different model, as
    # valid as any), checked on rows at its thresholds and on test rows with NaN.
    modes = onnx.ModelProto()
    modes.CopyFrom(gb_onnx)
    tec = next(n for n in modes.graph.node if n.op_type == "TreeEnsembleClassifier")
    attrs = {a.name: a for a in tec.attribute}
    cycle = [b"BRANCH_LEQ", b"BRANCH_LT", b"BRANCH_GTE", b"BRANCH_GT"]
    split = 0
    tracks = []
    for i, m in enumerate(list(attrs["nodes_modes"].strings)):
        if m != b"LEAF":
            attrs["nodes_modes"].strings[i] = cycle[split % 4]
            tracks.append(1 if split % 3 == 0 else 0)
            split += 1
        else:
            tracks.append(0)
    del attrs["nodes_missing_value_tracks_true"].ints[:]
    attrs["nodes_missing_value_tracks_true"].ints.extend(tracks)
    save("all_modes", modes)
    wide = spec(NAN_FEATURES)
    wide["policy"]["approve_below"], wide["policy"]["decline_at_or_above"] = 0.5, 0.9
    cv.write_json(os.path.join(out, "spec_wide_cutoffs.json"), wide)
    edge("all_modes", modes, missing=True)
    edges[-1]["spec"] = "spec_wide_cutoffs.json"  # the rewritten model's average risk is high
    p_modes, _ = ort_probability(modes, Xte_m)
    edges[-1]["rows"].extend({"applicant": cv.applicant(r, NAMES), "onnxruntime": float(v)} for r, v in zip(Xte_m, p_modes))

    # Exponential loss: skl2onnx scales the summed scores by 2 and applies a Sigmoid node.
    gbe = GradientBoostingClassifier(loss="exponential", n_estimators=20, max_depth=2, random_state=SEED).fit(X32, ytr)
    gbe_onnx = sk_onnx(gbe, X32)
    pe, _ = ort_probability(gbe_onnx, Xte)
    check_close("gradient_boosting_exponential: onnxruntime vs library probabilities", pe, gbe.predict_proba(Xte)[:, 1], 2e-6)
    save("gradient_boosting_exponential", gbe_onnx)
    edge("gradient_boosting_exponential", gbe_onnx)
    edges[-1]["rows"].extend({"applicant": cv.applicant(r, NAMES), "onnxruntime": float(v)} for r, v in zip(Xte, pe))

    # A TreeEnsembleRegressor summing log-odds, followed by a Sigmoid: the same trees as a regressor.
    ra = {a.name: helper.get_attribute_value(a) for a in tec.attribute}
    gb_tec = next(n for n in gb_onnx.graph.node if n.op_type == "TreeEnsembleClassifier")
    ra = {a.name: helper.get_attribute_value(a) for a in gb_tec.attribute}
    reg = helper.make_node(
        "TreeEnsembleRegressor", ["X"], ["margin"], domain="ai.onnx.ml", n_targets=1, aggregate_function="SUM",
        post_transform="NONE", base_values=list(ra["base_values"]),
        **{k: ra[k] for k in ra if k.startswith("nodes_")},
        target_ids=[0] * len(ra["class_ids"]), target_nodeids=ra["class_nodeids"], target_treeids=ra["class_treeids"],
        target_weights=list(ra["class_weights"]))
    regressor = graph_model(
        [reg, helper.make_node("Sigmoid", ["margin"], ["probability"])],
        outputs=[helper.make_tensor_value_info("probability", TensorProto.FLOAT, [None, 1])])
    pr, _ = ort_probability(regressor, Xte)
    check_close("regressor_sigmoid: onnxruntime vs the classifier's probabilities", pr, gb.predict_proba(Xte)[:, 1], 2e-6)
    save("regressor_sigmoid", regressor)
    edge("regressor_sigmoid", regressor)
    edges[-1]["rows"].extend({"applicant": cv.applicant(r, NAMES), "onnxruntime": float(v)} for r, v in zip(Xte, pr))

    hgb = HistGradientBoostingClassifier(max_iter=30, max_depth=4, early_stopping=False, random_state=SEED).fit(X32m, ytr)
    ex = shap.TreeExplainer(hgb)
    case("hist_gradient_boosting", sk_onnx(hgb, X32m), Xte_m, hgb.predict_proba(Xte_m)[:, 1], ex.shap_values(Xte_m),
         float(np.asarray(ex.expected_value).reshape(-1)[0]),
         f"shap {shap.__version__} TreeExplainer(HistGradientBoostingClassifier), path-dependent, log-odds", "log_odds", missing=True)

    lg = lgb.LGBMClassifier(n_estimators=30, num_leaves=12, learning_rate=0.1, min_child_samples=20, num_threads=1,
                            deterministic=True, force_row_wise=True, verbose=-1, random_state=SEED).fit(X32m, ytr)
    lg_onnx = onnxmltools.convert_lightgbm(lg, name="lightgbm", initial_types=[("input", FloatTensorType([None, 6]))],
                                           zipmap=False, target_opset=15)
    pc = lg.booster_.predict(Xte_m, pred_contrib=True)
    case("lightgbm", lg_onnx, Xte_m, lg.predict_proba(Xte_m)[:, 1], pc[:, :-1], float(pc[0, -1]),
         f"LightGBM {lgb.__version__} Booster.predict(X, pred_contrib=True)", "log_odds", missing=True)

    xg = xgb.XGBClassifier(n_estimators=30, max_depth=3, learning_rate=0.3, tree_method="hist", n_jobs=1,
                           random_state=SEED).fit(X32m, ytr)
    xg_onnx = onnxmltools.convert_xgboost(xg, name="xgboost", initial_types=[("input", FloatTensorType([None, 6]))],
                                          target_opset=15)
    pcx = xg.get_booster().predict(xgb.DMatrix(Xte_m.astype(np.float32), missing=np.nan), pred_contribs=True)
    case("xgboost", xg_onnx, Xte_m, xg.predict_proba(Xte_m)[:, 1], pcx[:, :-1], float(pcx[0, -1]),
         f"XGBoost {xgb.__version__} Booster.predict(pred_contribs=True) (covers are hessian sums)", "log_odds",
         missing=True, covers="hessian")
    edge("xgboost", xg_onnx, missing=True, covers="hessian")

    lr = make_pipeline(StandardScaler(), LogisticRegression(C=1.0, max_iter=1000)).fit(X32, ytr)
    Z = lr[0].transform(X32)
    lex = shap.LinearExplainer(lr[1], shap.maskers.Independent(Z, max_samples=Z.shape[0]))
    case("logistic_regression", sk_onnx(lr, X32), Xte, lr.predict_proba(Xte)[:, 1], lex.shap_values(lr[0].transform(Xte.astype(np.float32))),
         float(np.asarray(lex.expected_value).reshape(-1)[0]),
         f"shap {shap.__version__} LinearExplainer(LogisticRegression, Independent masker over all training rows), log-odds", "log_odds")

    # A Scaler in front of trees: splits are mapped back to raw units exactly.
    gbs = make_pipeline(StandardScaler(), GradientBoostingClassifier(n_estimators=10, max_depth=2, random_state=SEED)).fit(X32, ytr)
    gbs_onnx = sk_onnx(gbs, X32)
    scaler = next(n for n in gbs_onnx.graph.node if n.op_type == "Scaler")
    sa = {x.name: list(helper.get_attribute_value(x)) for x in scaler.attribute}
    SCALER.update(offset=sa["offset"], scale=sa["scale"])
    ex = shap.TreeExplainer(gbs[1])
    case("scaler_gradient_boosting", gbs_onnx, Xte, gbs.predict_proba(Xte)[:, 1], ex.shap_values(gbs[0].transform(Xte.astype(np.float32))),
         float(np.asarray(ex.expected_value).reshape(-1)[0]),
         f"shap {shap.__version__} TreeExplainer(GradientBoostingClassifier) on the scaled inputs, log-odds", "log_odds")

    edge("scaler_gradient_boosting", gbs_onnx, scaled=True)

    # A float64 input: thresholds arrive as double tensors and are kept exactly.
    rfd = RandomForestClassifier(n_estimators=5, max_depth=4, bootstrap=False, random_state=SEED, n_jobs=1).fit(Xtr, ytr)
    rfd_onnx = skl2onnx.to_onnx(rfd, Xtr[:1], options={id(rfd): {"zipmap": False}}, target_opset=OPSET)
    ex = shap.TreeExplainer(rfd)
    case("random_forest_double", rfd_onnx, Xte, rfd.predict_proba(Xte)[:, 1], np.asarray(ex.shap_values(Xte))[:, :, 1],
         float(np.asarray(ex.expected_value).reshape(-1)[1]),
         f"shap {shap.__version__} TreeExplainer(RandomForestClassifier), path-dependent, class 1", "probability")
    edge("random_forest_double", rfd_onnx)

    # With ZipMap: the probability output is a sequence of maps.
    rfz = RandomForestClassifier(n_estimators=5, max_depth=4, bootstrap=False, random_state=SEED, n_jobs=1).fit(X32, ytr)
    ex = shap.TreeExplainer(rfz)
    case("random_forest_zipmap", skl2onnx.to_onnx(rfz, X32[:1], target_opset=OPSET), Xte, rfz.predict_proba(Xte)[:, 1],
         np.asarray(ex.shap_values(Xte))[:, :, 1], float(np.asarray(ex.expected_value).reshape(-1)[1]),
         f"shap {shap.__version__} TreeExplainer(RandomForestClassifier), path-dependent, class 1", "probability")

    # Any model: neural networks and a support-vector machine, kept as graphs and explained by
    # exact interventional Shapley values against an explicit background (shap's Exact explainer
    # with an Independent masker over the same rows, onnxruntime as the model).
    bg = Xtr[:N_BACKGROUND]
    with open(os.path.join(out, "background.csv"), "w", encoding="utf-8", newline="\n") as f:
        f.write(",".join(NAMES) + "\n")
        for row in bg:
            f.write(",".join(repr(float(v)) for v in row) + "\n")
    Xg = Xte[:N_GRAPH_ROWS]

    def graph_case(name, model, lib_prob):
        s = session(model)
        inp = s.get_inputs()[0].name

        def f(X):
            return ort_probability(model, np.asarray(X, dtype=np.float32))[0]

        ex = shap.explainers.Exact(f, shap.maskers.Independent(bg, max_samples=bg.shape[0]))
        e = ex(Xg)
        d = np.max(np.abs(np.asarray(e.base_values) + e.values.sum(axis=1) - f(Xg)))
        if not d <= 1e-6:
            fail(f"{name}: shap Exact values do not add up ({d})")
        case(name, model, Xg, lib_prob, e.values, float(np.asarray(e.base_values).reshape(-1)[0]),
             f"shap {shap.__version__} Exact explainer, Independent masker over background.csv, onnxruntime {ort.__version__} as the model",
             "probability")
        cases[-1]["background"] = "background.csv"
        del inp

    from sklearn.neural_network import MLPClassifier
    from sklearn.svm import SVC
    mlp = make_pipeline(StandardScaler(), MLPClassifier(hidden_layer_sizes=(16, 8), max_iter=800, random_state=SEED)).fit(X32, ytr)
    graph_case("mlp_relu", sk_onnx(mlp, X32), mlp.predict_proba(Xg)[:, 1])
    mlpt = make_pipeline(StandardScaler(), MLPClassifier(hidden_layer_sizes=(8,), activation="tanh", max_iter=800, random_state=SEED)).fit(X32, ytr)
    graph_case("mlp_tanh_zipmap", skl2onnx.to_onnx(mlpt, X32[:1], target_opset=OPSET), mlpt.predict_proba(Xg)[:, 1])
    svc = make_pipeline(StandardScaler(), SVC(kernel="rbf", probability=True, random_state=SEED)).fit(X32[:600], ytr[:600])
    graph_case("svm_rbf", sk_onnx(svc, X32), svc.predict_proba(Xg)[:, 1])

    # A hand-built graph through Normalizer (native) and Softmax (tract), which no first-layer
    # shortcut applies to: every hybrid row is evaluated in full.
    W2 = np.array([[0.8, -0.6], [-0.5, 0.4], [0.3, 0.9], [-0.7, 0.2], [0.6, -0.4], [0.1, 0.5]], dtype=np.float32)
    normalizer_graph = graph_model(
        [helper.make_node("Normalizer", ["X"], ["n"], domain="ai.onnx.ml", norm="L2"),
         helper.make_node("MatMul", ["n", "W"], ["z"]), helper.make_node("Add", ["z", "b"], ["logits"]),
         helper.make_node("Softmax", ["logits"], ["probabilities"], axis=1)],
        outputs=[helper.make_tensor_value_info("probabilities", TensorProto.FLOAT, [None, 2])],
        initializers=[onnx.numpy_helper.from_array(W2, "W"), onnx.numpy_helper.from_array(np.array([0.4, -1.6], dtype=np.float32), "b")],
    )
    graph_case("normalizer_softmax", normalizer_graph, ort_probability(normalizer_graph, Xg)[0])

    # A linear function as a graph, for the closed form beta * (x - mean of the background).
    w = np.array([[0.02], [-0.015], [0.01], [-0.03], [0.025], [0.005]], dtype=np.float32)
    lin = graph_model(
        [helper.make_node("MatMul", ["X", "w"], ["xw"]), helper.make_node("Add", ["xw", "c"], ["probability"])],
        outputs=[helper.make_tensor_value_info("probability", TensorProto.FLOAT, [None, 1])],
        initializers=[onnx.numpy_helper.from_array(w, "w"), onnx.numpy_helper.from_array(np.array([0.3], dtype=np.float32), "c")],
    )
    linear_graph = {"model": save("linear_graph", lin), "weights": [float(v) for v in w.reshape(-1)], "intercept": 0.3}

    refused = []
    for name, model, words in refusals():
        refused.append({"name": name, "model": save(f"refuse_{name}", model), "spec": "spec.json", "reference": "complete.csv", "expect": words})
    # A spec with one field fewer than the model's six input columns.
    narrow = spec()
    narrow["features"] = narrow["features"][:5]
    narrow["reasons"] = narrow["reasons"][:5]
    cv.write_json(os.path.join(out, "spec_five_fields.json"), narrow)
    refused.append({"name": "column_count", "model": "gradient_boosting.onnx", "spec": "spec_five_fields.json",
                    "reference": "complete.csv", "expect": ["has 6 columns", "encode to 5"]})

    cv.write_json(os.path.join(out, "expected.json"), {
        "libraries": versions, "cases": cases, "edges": edges, "refusals": refused, "linear_graph": linear_graph,
        "notes": "Probabilities are onnxruntime's (float32 arithmetic); contributions are the named library's.",
    })
    for line in log:
        print(f"make_onnx: {line}", file=sys.stderr)
    print(f"make_onnx: ok, wrote {out}", file=sys.stderr)


if __name__ == "__main__":
    if len(sys.argv) != 2:
        raise SystemExit("usage: make_onnx.py OUTDIR")
    main(sys.argv[1])
