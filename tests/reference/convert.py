"""Shared helpers: convert trained LightGBM / scikit-learn tree ensembles to plumbline artifacts,
evaluate artifacts in plain Python, compute exact (brute-force) Shapley values on them, and write
deterministic JSON.

Imported by tests/reference/make_fixtures.py and bench/explain_models.py. Only numpy is needed at
import time; LightGBM and scikit-learn objects are duck-typed.

Conventions (they are the contract the Rust side is tested against):

LightGBM (Booster.dump_model()):
  * split:  column = feature_names[split_feature], threshold = threshold (a double, dumped by
    LightGBM with 17 significant digits), comparison "<=" (decision_type must be "<=").
  * missing side: missing_type "NaN"  -> default_left ? left : right;
                  missing_type "None" -> LightGBM replaces NaN by 0.0 before comparing, so the side
                                         is left if 0.0 <= threshold else right (default_left is
                                         ignored by LightGBM there);
                  missing_type "Zero" and categorical splits are rejected.
  * cover = internal_count (split) / leaf_count (leaf): the training-row counts LightGBM's own
    TreeSHAP (pred_contrib) uses. A single-leaf tree gets cover = number of training rows.
  * leaf value = leaf_value; aggregation sum_log_odds; initial_value 0 (LightGBM folds the initial
    score into the first tree's leaves; checked by the callers).

scikit-learn (RandomForestClassifier, sklearn >= 1.4 stores tree_.value as class fractions):
  * split: column = feature_names[tree_.feature], threshold = tree_.threshold, comparison "<=".
    sklearn compares float32(x) <= threshold, so inputs must be float32-representable for the
    float64 comparison to agree.
  * missing side: tree_.missing_go_to_left (what sklearn's predict does with NaN; for a node that
    saw no NaN in training sklearn sends NaN to the child with more samples).
  * cover = tree_.weighted_n_node_samples (in-bag bootstrap counts; what shap uses).
  * leaf value = value[node, 0, 1] / (value[node, 0, 0] + value[node, 0, 1]) i.e. exactly what
    DecisionTreeClassifier.predict_proba returns for class 1; aggregation mean_probability.
"""

from __future__ import annotations

import json
import math
from typing import Any, Iterable, Sequence

import numpy as np

FORMAT_TAG = "plumbline.model"
FORMAT_VERSION = 2
CREATED_AT = "2026-12-01T00:00:00Z"


# --------------------------------------------------------------------------------------------
# LightGBM
# --------------------------------------------------------------------------------------------


def lightgbm_trees(dump: dict, feature_names: Sequence[str], n_rows: int) -> list[dict]:
    """Convert `booster.dump_model()` to a list of artifact trees (each {"nodes": [...]})."""
    names = list(dump["feature_names"])
    assert names == list(feature_names), (names, feature_names)
    assert dump.get("num_class", 1) == 1, "binary / single-output models only"
    trees = []
    for info in dump["tree_info"]:
        assert info.get("num_cat", 0) == 0, "categorical splits are not supported"
        nodes: list[dict] = []

        def visit(node: dict) -> int:
            idx = len(nodes)
            nodes.append({})  # placeholder, keeps pre-order numbering (root = 0)
            if "split_index" in node:
                dt = node["decision_type"]
                assert dt == "<=", f"unsupported decision_type {dt!r}"
                mt = node["missing_type"]
                thr = float(node["threshold"])
                assert math.isfinite(thr)
                if mt == "NaN":
                    side = "left" if node["default_left"] else "right"
                elif mt == "None":
                    side = "left" if 0.0 <= thr else "right"
                else:
                    raise AssertionError(f"unsupported missing_type {mt!r}")
                left = visit(node["left_child"])
                right = visit(node["right_child"])
                nodes[idx] = {
                    "column": names[node["split_feature"]],
                    "threshold": thr,
                    "comparison": "<=",
                    "missing": side,
                    "left": left,
                    "right": right,
                    "cover": float(node["internal_count"]),
                }
            else:
                cover = node.get("leaf_count")
                if cover is None:  # single-leaf tree: LightGBM dumps no count
                    cover = n_rows
                nodes[idx] = {"value": float(node["leaf_value"]), "cover": float(cover)}
            return idx

        visit(info["tree_structure"])
        trees.append({"nodes": nodes})
    return trees


def lightgbm_missing_types(dump: dict) -> dict[str, set[str]]:
    """feature name -> set of missing_type values seen at its splits (for reporting)."""
    names = dump["feature_names"]
    out: dict[str, set[str]] = {}

    def visit(node: dict) -> None:
        if "split_index" in node:
            out.setdefault(names[node["split_feature"]], set()).add(
                f'{node["missing_type"]}/default_left={node["default_left"]}'
            )
            visit(node["left_child"])
            visit(node["right_child"])

    for info in dump["tree_info"]:
        visit(info["tree_structure"])
    return out


# --------------------------------------------------------------------------------------------
# scikit-learn
# --------------------------------------------------------------------------------------------


def sklearn_tree(tree_, feature_names: Sequence[str], positive_class: int = 1) -> dict:
    """Convert one fitted sklearn classification `tree_` (binary) to an artifact tree."""
    assert tree_.n_outputs == 1
    assert tree_.value.shape[2] == 2, "binary classifiers only"
    left_a = tree_.children_left
    right_a = tree_.children_right
    mgl = getattr(tree_, "missing_go_to_left", None)
    order: list[int] = []  # pre-order renumbering, root first

    def walk(i: int) -> None:
        order.append(i)
        if left_a[i] != -1:
            walk(int(left_a[i]))
            walk(int(right_a[i]))

    walk(0)
    new_id = {old: new for new, old in enumerate(order)}
    nodes = []
    for old in order:
        cover = float(tree_.weighted_n_node_samples[old])
        if left_a[old] == -1:
            v = tree_.value[old, 0, :].astype(np.float64)
            total = v.sum()
            value = float(v[positive_class] / total) if total != 0.0 else float(v[positive_class])
            nodes.append({"value": value, "cover": cover})
        else:
            side = "left" if (mgl is None or bool(mgl[old])) else "right"
            nodes.append(
                {
                    "column": feature_names[int(tree_.feature[old])],
                    "threshold": float(tree_.threshold[old]),
                    "comparison": "<=",
                    "missing": side,
                    "left": new_id[int(left_a[old])],
                    "right": new_id[int(right_a[old])],
                    "cover": cover,
                }
            )
    return {"nodes": nodes}


def forest_trees(forest, feature_names: Sequence[str]) -> list[dict]:
    assert list(forest.classes_) == [0, 1], forest.classes_
    return [sklearn_tree(est.tree_, feature_names) for est in forest.estimators_]


# --------------------------------------------------------------------------------------------
# Artifact assembly
# --------------------------------------------------------------------------------------------


def applicant(row: Iterable[float], names: Sequence[str]) -> dict[str, Any]:
    """One applicant JSON object: NaN becomes null."""
    out: dict[str, Any] = {}
    for name, v in zip(names, row):
        v = float(v)
        out[name] = None if math.isnan(v) else v
    return out


def make_artifact(
    *,
    model_id: str,
    description: str,
    producer: str,
    feature_names: Sequence[str],
    bounds: tuple[float, float],
    aggregation: str,
    trees: list[dict],
    background: np.ndarray,
    reference_label: str,
    provenance: dict | None = None,
) -> dict:
    features = []
    reasons = []
    for i, name in enumerate(feature_names):
        code = f"R{i:02d}"
        features.append(
            {
                "name": name,
                "kind": "number",
                "unit": "",
                "min": float(bounds[0]),
                "max": float(bounds[1]),
                "missing": {"policy": "tree_default"},
                "reason": code,
            }
        )
        reasons.append({"code": code, "text": f"Reference feature {name} value raised the estimated risk"})
    art = {
        "format": FORMAT_TAG,
        "format_version": FORMAT_VERSION,
        "identity": {
            "model_id": model_id,
            "version": "1.0.0",
            "description": description,
            "created_at": CREATED_AT,
            "producer": producer,
            "score_provider": "plumbline reference fixtures (generated data)",
        },
        "features": features,
        "model": {
            "kind": "tree_ensemble",
            "aggregation": aggregation,
            "initial_value": 0.0,
            "trees": trees,
        },
        "explanation": {
            "method": "tree_cover_weighted",
            "reference": {"population": "all_applicants", "label": reference_label},
            "background": [applicant(r, feature_names) for r in background],
        },
        "reasons": reasons,
        "policy": {
            "approve_below": 0.1,
            "decline_at_or_above": 0.3,
            "scaling": {"points": 600.0, "odds": 50.0, "pdo": 20.0, "min_score": 300.0, "max_score": 850.0},
            "max_reasons": 4,
        },
    }
    if provenance is not None:
        art["provenance"] = provenance
    return art


# --------------------------------------------------------------------------------------------
# Evaluation in plain Python (an independent reading of the artifact semantics)
# --------------------------------------------------------------------------------------------


class Compiled:
    """Artifact trees as arrays (column index, threshold, missing-left, children, value, cover)."""

    def __init__(self, artifact: dict):
        names = [f["name"] for f in artifact["features"]]
        col = {n: i for i, n in enumerate(names)}
        model = artifact["model"]
        assert model["kind"] == "tree_ensemble"
        self.aggregation = model["aggregation"]
        self.base_score = float(model.get("initial_value", 0.0))
        self.n_features = len(names)
        self.trees = []
        for t in model["trees"]:
            rows = []
            for n in t["nodes"]:
                if "value" in n:
                    rows.append((-1, 0.0, True, -1, -1, n["value"], n["cover"], True))
                else:
                    assert n["comparison"] in ("<=", "<")
                    rows.append(
                        (
                            col[n["column"]],
                            n["threshold"],
                            n["missing"] == "left",
                            n["left"],
                            n["right"],
                            0.0,
                            n["cover"],
                            n["comparison"] == "<=",
                        )
                    )
            self.trees.append(rows)
        # numpy form for vectorised evaluation
        self.np_trees = []
        for rows in self.trees:
            a = list(zip(*rows))
            self.np_trees.append(
                dict(
                    feat=np.array(a[0], dtype=np.int64),
                    thr=np.array(a[1], dtype=np.float64),
                    mleft=np.array(a[2], dtype=bool),
                    left=np.array(a[3], dtype=np.int64),
                    right=np.array(a[4], dtype=np.int64),
                    value=np.array(a[5], dtype=np.float64),
                    le=np.array(a[7], dtype=bool),
                )
            )

    # -- scalar, pure Python ------------------------------------------------------------------
    @staticmethod
    def _go(node, x):
        f, thr, mleft, left, right, _v, _c, le = node
        v = x[f]
        if v != v:  # NaN
            return left if mleft else right
        if le:
            return left if v <= thr else right
        return left if v < thr else right

    def predict_row(self, x: Sequence[float]) -> float:
        total = 0.0
        for rows in self.trees:
            i = 0
            while rows[i][0] >= 0:
                i = self._go(rows[i], x)
            total += rows[i][5]
        return self._finish(total)

    def _finish(self, total):
        if self.aggregation == "sum_log_odds":
            return self.base_score + total
        return total / len(self.trees)

    # -- vectorised ---------------------------------------------------------------------------
    def predict(self, X: np.ndarray) -> np.ndarray:
        X = np.asarray(X, dtype=np.float64)
        total = np.zeros(X.shape[0])
        r = np.arange(X.shape[0])
        for t in self.np_trees:
            node = np.zeros(X.shape[0], dtype=np.int64)
            while True:
                active = t["feat"][node] >= 0
                if not active.any():
                    break
                f = np.where(active, t["feat"][node], 0)
                v = X[r, f]
                thr = t["thr"][node]
                cmp = np.where(t["le"][node], v <= thr, v < thr)
                go_left = np.where(np.isnan(v), t["mleft"][node], cmp)
                nxt = np.where(go_left, t["left"][node], t["right"][node])
                node = np.where(active, nxt, node)
            total += t["value"][node]
        return self._finish(total)

    # -- exact Shapley values by enumeration of coalitions -------------------------------------
    def _weights(self):
        m = self.n_features
        return [math.factorial(s) * math.factorial(m - s - 1) / math.factorial(m) for s in range(m)]

    def _shapley(self, v: dict) -> list[float]:
        m = self.n_features
        w = self._weights()
        phi = []
        for i in range(m):
            bit = 1 << i
            acc = 0.0
            for mask in range(1 << m):
                if mask & bit:
                    continue
                acc += w[bin(mask).count("1")] * (v[mask | bit] - v[mask])
            phi.append(acc)
        return phi

    def path_dependent_brute(self, x: Sequence[float]) -> tuple[list[float], float]:
        """Shapley values of v(S) = sum over trees of E[tree | x_S] with the cover-weighted
        expectation of Lundberg et al. (2018), Algorithm 1 (child cover / parent cover)."""
        m = self.n_features
        x = [float(a) for a in x]

        def expval(rows, i, mask):
            f, thr, mleft, left, right, value, cover, le = rows[i]
            if f < 0:
                return value
            if mask >> f & 1:
                return expval(rows, self._go(rows[i], x), mask)
            return (rows[left][6] * expval(rows, left, mask) + rows[right][6] * expval(rows, right, mask)) / cover

        v = {}
        for mask in range(1 << m):
            v[mask] = self._finish(sum(expval(rows, 0, mask) for rows in self.trees))
        return self._shapley(v), v[0]

    def interventional_brute(self, x: Sequence[float], background: np.ndarray) -> tuple[list[float], float]:
        """Shapley values of v(S) = mean over background b of f(x_S, b_rest)."""
        m = self.n_features
        x = np.asarray(x, dtype=np.float64)
        B = np.asarray(background, dtype=np.float64)
        masks = list(range(1 << m))
        Z = np.repeat(B[None, :, :], len(masks), axis=0).copy()
        for k, mask in enumerate(masks):
            for j in range(m):
                if mask >> j & 1:
                    Z[k, :, j] = x[j]
        out = self.predict(Z.reshape(-1, m)).reshape(len(masks), B.shape[0])
        v = {mask: float(out[k].mean()) for k, mask in enumerate(masks)}
        return self._shapley(v), v[0]


# --------------------------------------------------------------------------------------------
# Deterministic JSON
# --------------------------------------------------------------------------------------------


def _scalar(o) -> bool:
    return o is None or isinstance(o, (bool, int, float, str))


def _check(o):
    if isinstance(o, float) and not math.isfinite(o):
        raise ValueError("non-finite float in output")
    if isinstance(o, (np.generic, np.ndarray)):
        raise TypeError(f"numpy value {o!r} must be converted before writing")


def dumps(obj) -> str:
    """JSON with sorted keys, floats as Python repr (shortest round-trip), containers whose
    members are all scalars on one line (one tree node, one applicant per line)."""

    def enc(o, depth):
        _check(o)
        pad = "  " * (depth + 1)
        end = "  " * depth
        if isinstance(o, dict):
            for v in o.values():
                _check(v)
            if all(_scalar(v) for v in o.values()):
                return json.dumps(o, sort_keys=True, allow_nan=False)
            if not o:
                return "{}"
            items = [f"{pad}{json.dumps(k)}: {enc(o[k], depth + 1)}" for k in sorted(o)]
            return "{\n" + ",\n".join(items) + "\n" + end + "}"
        if isinstance(o, (list, tuple)):
            for v in o:
                _check(v)
            if all(_scalar(v) for v in o):
                return json.dumps(list(o), allow_nan=False)
            items = [f"{pad}{enc(v, depth + 1)}" for v in o]
            return "[\n" + ",\n".join(items) + "\n" + end + "]"
        return json.dumps(o, allow_nan=False)

    return enc(obj, 0) + "\n"


def write_json(path, obj) -> None:
    text = dumps(obj)
    json.loads(text)  # self-check
    with open(path, "w", encoding="utf-8", newline="\n") as fh:
        fh.write(text)
