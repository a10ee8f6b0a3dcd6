#!/usr/bin/env bash
# The README's "Bring a model from Python" example, run end to end and checked: invented data ->
# scikit-learn + skl2onnx -> draft-spec -> import (with the edited spec) -> a decision, whose
# probability must be onnxruntime's. Used by .ci/run.
#
#   examples/python/run_example.sh PLUMBLINE_BINARY PYTHON
set -euo pipefail
cd "$(dirname "${BASH_SOURCE[0]}")/../.."
bin="$1"
py="$2"
dir=target/example
mkdir -p "$dir"
"$bin" demo-data --rows 20000 --seed 7 --out "$dir/applications.csv"
"$py" examples/python/train_export.py "$dir/applications.csv" "$dir/model.onnx"
"$bin" draft-spec --data "$dir/applications.csv" >"$dir/draft.json"
"$bin" import "$dir/model.onnx" --spec examples/python/fernhill-hgb.spec.json \
    --reference "$dir/applications.csv" --out "$dir/fernhill-hgb.json"
"$bin" inspect "$dir/fernhill-hgb.json" | grep -q 'ONNX file sha256'
cat >"$dir/request.json" <<'JSON'
{"application_id": "FH-2026-000211", "applicant": {"requested_amount": 18000, "annual_income": 41000, "debt_to_income": 38.5, "revolving_utilization": null, "months_since_oldest_account": 30, "delinquencies_24m": 2, "inquiries_6m": 4, "months_with_employer": 8, "housing": "rent", "loan_purpose": "debt_consolidation"}}
JSON
"$bin" score --model "$dir/fernhill-hgb.json" "$dir/request.json" >"$dir/decision.json"
"$py" - "$dir" <<'PY'
import json, sys
import numpy as np
import onnxruntime as ort
d = sys.argv[1]
decision = json.load(open(f"{d}/decision.json"))
s = ort.InferenceSession(f"{d}/model.onnx", providers=["CPUExecutionProvider"])
x = np.array([[18000, 41000, 38.5, np.nan, 30, 2, 4, 8, 0, 0, 0, 0, 0, 0, 0]], dtype=np.float32)
want = float(s.run(None, {"X": x})[1][0, 1])
got = decision["probability_of_default"]
assert abs(got - want) <= 2e-7, (got, want)
assert decision["outcome"] == "decline" and decision["reasons"][0]["code"] == "DTI", decision
print(f"example: plumbline {got!r}, onnxruntime {want!r}; outcome {decision['outcome']}")
PY
