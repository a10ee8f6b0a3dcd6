"""Python half of the import benchmark.

usage: python bench/import_models.py OUTDIR

Trains the benchmark's 500-tree LightGBM model (the same data and parameters as
bench/explain_models.py) on 20,000 rows, exports it with onnxmltools, and writes to OUTDIR:
  lightgbm500.onnx    the export;
  reference.csv       the 20,000 training rows, the reference CSV `plumbline import` reads;
  spec.json           a spec for them;
  rows.json           1,000 test applicants;
  python.json         LightGBM pred_contrib time per row (batch and single rows), onnxruntime
                      probability time, versions. Single-threaded throughout.
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


def main(out):
    import lightgbm as lgb
    import numpy as np
    import onnxmltools
    import onnxruntime as ort
    from onnxmltools.convert.common.data_types import FloatTensorType

    os.makedirs(out, exist_ok=True)
    X, y = em.make_data(em.N_TRAIN + em.N_ROWS)
    Xtr, ytr, Xte = X[: em.N_TRAIN], y[: em.N_TRAIN], X[em.N_TRAIN :]
    clf = lgb.LGBMClassifier(n_estimators=em.LGB_ROUNDS, **{k: v for k, v in em.LGB_PARAMS.items() if k not in ("objective", "seed")},
                             random_state=em.SEED).fit(Xtr, ytr)
    onx = onnxmltools.convert_lightgbm(clf, name="lightgbm500", initial_types=[("input", FloatTensorType([None, em.N_FEATURES]))],
                                       zipmap=False, target_opset=15)
    with open(f"{out}/lightgbm500.onnx", "wb") as f:
        f.write(onx.SerializeToString())
    with open(f"{out}/reference.csv", "w") as f:
        f.write(",".join(em.NAMES) + ",defaulted\n")
        for r, t in zip(Xtr, ytr):
            f.write(",".join(repr(float(v)) for v in r) + f",{int(t)}\n")
    spec = {
        "model_id": "bench-lightgbm500", "version": "1.0.0", "created_at": "2026-12-02T00:00:00Z", "score_provider": "plumbline benchmark (generated data)",
        "description": "Benchmark model on generated data; not a credit model", "target": "defaulted",
        "features": [{"name": n, "kind": "number", "missing": {"policy": "reject"}, "reason": n.upper()} for n in em.NAMES],
        "reasons": [{"code": n.upper(), "text": f"Generated input {n} moved the estimate towards default"} for n in em.NAMES],
        "policy": {"approve_below": 0.05, "decline_at_or_above": 0.2, "scaling": {"points": 600, "odds": 50, "pdo": 20, "min_score": 300, "max_score": 850}},
        "reference": {"population": "all_applicants", "label": "All 20,000 generated training rows"},
    }
    json.dump(spec, open(f"{out}/spec.json", "w"), indent=1)
    json.dump([{n: float(v) for n, v in zip(em.NAMES, r)} for r in Xte], open(f"{out}/rows.json", "w"))

    booster = clf.booster_
    def best(fn, repeats=3):
        times = []
        for _ in range(repeats):
            t = time.perf_counter()
            fn()
            times.append(time.perf_counter() - t)
        return min(times)
    batch = best(lambda: booster.predict(Xte, pred_contrib=True, num_threads=1)) / len(Xte)
    single = best(lambda: [booster.predict(Xte[i:i + 1], pred_contrib=True, num_threads=1) for i in range(200)], 1) / 200
    so = ort.SessionOptions()
    so.intra_op_num_threads = 1
    so.inter_op_num_threads = 1
    so.log_severity_level = 3
    s = ort.InferenceSession(onx.SerializeToString(), so, providers=["CPUExecutionProvider"])
    x32 = Xte.astype(np.float32)
    ort_batch = best(lambda: s.run(None, {"input": x32})) / len(Xte)
    result = {
        "lightgbm_pred_contrib_us_per_row_batch": batch * 1e6,
        "lightgbm_pred_contrib_us_per_row_single": single * 1e6,
        "onnxruntime_probability_us_per_row_batch": ort_batch * 1e6,
        "versions": {"python": platform.python_version(), "lightgbm": lgb.__version__,
                     "onnxmltools": onnxmltools.__version__, "onnxruntime": ort.__version__},
    }
    json.dump(result, open(f"{out}/python.json", "w"), indent=1)
    print(json.dumps(result, indent=1))


if __name__ == "__main__":
    if len(sys.argv) != 2:
        raise SystemExit(__doc__)
    main(sys.argv[1])
