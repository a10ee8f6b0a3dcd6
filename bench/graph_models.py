"""Python half of the graph-model benchmark (neural network and support-vector machine).

usage: python bench/graph_models.py OUTDIR

On the explain benchmark's generated data (10 numeric fields; bench/explain_models.py) trains a
scikit-learn MLPClassifier (hidden layers 16 and 8) on 20,000 rows and an RBF SVC with Platt
probabilities on 2,000 rows, both behind a StandardScaler, exports them with skl2onnx, and writes
to OUTDIR: mlp.onnx, svm.onnx, reference.csv (the 20,000 rows), spec.json, background.csv (100
rows), rows.json (100 test applicants), and python.json: shap's Exact explainer (Independent
masker over the same background, onnxruntime as the model) time per row on the first 20 test
rows, single-threaded, with versions.
"""

import os

for _v in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMEXPR_NUM_THREADS", "NUMBA_NUM_THREADS"):
    os.environ[_v] = "1"

import json  # noqa: E402
import platform  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402

sys.dont_write_bytecode = True
HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, HERE)
import explain_models as em  # noqa: E402

N_BACKGROUND = 100
N_ROWS = 100
N_TIMED = 20


def main(out):
    import numpy as np
    import onnxruntime as ort
    import shap
    import skl2onnx
    import sklearn
    from sklearn.neural_network import MLPClassifier
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler
    from sklearn.svm import SVC

    os.makedirs(out, exist_ok=True)
    X, y = em.make_data(em.N_TRAIN + N_ROWS)
    Xtr, ytr, Xte = X[: em.N_TRAIN], y[: em.N_TRAIN], X[em.N_TRAIN:]
    X32 = Xtr.astype(np.float32)
    models = {
        "mlp": make_pipeline(StandardScaler(), MLPClassifier(hidden_layer_sizes=(16, 8), max_iter=300, random_state=em.SEED)).fit(X32, ytr),
        "svm": make_pipeline(StandardScaler(), SVC(kernel="rbf", probability=True, random_state=em.SEED)).fit(X32[:2000], ytr[:2000]),
    }
    with open(f"{out}/reference.csv", "w") as f:
        f.write(",".join(em.NAMES) + ",defaulted\n")
        for r, t in zip(Xtr, ytr):
            f.write(",".join(repr(float(v)) for v in r) + f",{int(t)}\n")
    bg = Xtr[:N_BACKGROUND]
    with open(f"{out}/background.csv", "w") as f:
        f.write(",".join(em.NAMES) + "\n")
        for r in bg:
            f.write(",".join(repr(float(v)) for v in r) + "\n")
    spec = {
        "model_id": "bench-graph", "version": "1.0.0", "created_at": "2026-12-02T00:00:00Z", "score_provider": "plumbline benchmark (generated data)",
        "description": "Benchmark model on generated data; not a credit model", "target": "defaulted",
        "features": [{"name": n, "kind": "number", "missing": {"policy": "reject"}, "reason": n.upper()} for n in em.NAMES],
        "reasons": [{"code": n.upper(), "text": f"Generated input {n} moved the estimate towards default"} for n in em.NAMES],
        "policy": {"approve_below": 0.05, "decline_at_or_above": 0.3, "scaling": {"points": 600, "odds": 50, "pdo": 20, "min_score": 300, "max_score": 850}},
        "reference": {"population": "all_applicants", "label": "The 100 background rows", "alternate": False},
    }
    json.dump(spec, open(f"{out}/spec.json", "w"), indent=1)
    json.dump([{n: float(v) for n, v in zip(em.NAMES, r)} for r in Xte], open(f"{out}/rows.json", "w"))
    result = {"versions": {"python": platform.python_version(), "scikit-learn": sklearn.__version__, "shap": shap.__version__,
                           "skl2onnx": skl2onnx.__version__, "onnxruntime": ort.__version__}}
    for name, m in models.items():
        onx = skl2onnx.to_onnx(m, X32[:1], options={id(m[1]): {"zipmap": False}}, target_opset={"": 17, "ai.onnx.ml": 3})
        with open(f"{out}/{name}.onnx", "wb") as f:
            f.write(onx.SerializeToString())
        so = ort.SessionOptions()
        so.intra_op_num_threads = 1
        so.inter_op_num_threads = 1
        so.log_severity_level = 3
        s = ort.InferenceSession(onx.SerializeToString(), so, providers=["CPUExecutionProvider"])

        def f(Z):
            return s.run(None, {"X": np.asarray(Z, dtype=np.float32)})[1][:, 1]

        ex = shap.explainers.Exact(f, shap.maskers.Independent(bg, max_samples=N_BACKGROUND))
        ex(Xte[:2])  # warm up
        t = time.perf_counter()
        e = ex(Xte[:N_TIMED])
        per_row = (time.perf_counter() - t) / N_TIMED
        result[name] = {"shap_exact_ms_per_row": per_row * 1e3, "first_row_values": [float(v) for v in e.values[0]]}
        if name == "svm":
            result[name]["support_vectors"] = int(m[1].support_vectors_.shape[0])
    json.dump(result, open(f"{out}/python.json", "w"), indent=1)
    print(json.dumps(result, indent=1))


if __name__ == "__main__":
    if len(sys.argv) != 2:
        raise SystemExit(__doc__)
    main(sys.argv[1])
