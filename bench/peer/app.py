"""The decision service a lender would otherwise write, for the load benchmark only.

FastAPI + pydantic validation + LightGBM `pred_contrib` on one row + the top four adverse
contributions as reasons, on the same 500-tree model plumbline serves. Run:
    PEER_MODEL=target/bench-models/boosted500.lgb.txt uvicorn bench.peer.app:app --workers 2
"""
import math
import os
from typing import Dict, Optional

import lightgbm as lgb
import numpy as np
from fastapi import FastAPI
from pydantic import BaseModel, Field, field_validator

FEATURES = [f"x{i}" for i in range(10)]
BOOSTER = lgb.Booster(model_file=os.environ.get("PEER_MODEL", "target/bench-models/boosted500.lgb.txt"))
APPROVE_BELOW, DECLINE_AT_OR_ABOVE = 0.1, 0.3
FACTOR = 20 / math.log(2)
OFFSET = 600 - FACTOR * math.log(50)

app = FastAPI()


class Request(BaseModel):
    application_id: str = Field(min_length=1, max_length=128)
    applicant: Dict[str, Optional[float]]

    @field_validator("applicant")
    @classmethod
    def known_fields(cls, v):
        unknown = set(v) - set(FEATURES)
        if unknown:
            raise ValueError(f"unknown fields: {sorted(unknown)}")
        for k, x in v.items():
            if x is not None and not -1000 <= x <= 1000:
                raise ValueError(f"{k} out of range")
        return v


@app.post("/decide")
def decide(req: Request):
    row = np.array([[req.applicant.get(f, None) if req.applicant.get(f) is not None else np.nan for f in FEATURES]], dtype=np.float64)
    contrib = BOOSTER.predict(row, pred_contrib=True, num_threads=1)[0]
    log_odds = float(contrib.sum())
    p = 1.0 / (1.0 + math.exp(-log_odds))
    outcome = "approve" if p < APPROVE_BELOW else ("decline" if p >= DECLINE_AT_OR_ABOVE else "refer")
    by_field = {f: float(c) for f, c in zip(FEATURES, contrib[:-1])}
    adverse = sorted(((c, f) for f, c in by_field.items() if c > 0), reverse=True)[:4]
    return {
        "application_id": req.application_id,
        "probability_of_default": p,
        "log_odds": log_odds,
        "score": round(OFFSET - FACTOR * log_odds),
        "outcome": outcome,
        "reasons": [] if outcome == "approve" else [{"rank": i + 1, "code": f"R{f[1:].zfill(2)}", "contribution": c} for i, (c, f) in enumerate(adverse)],
        "contributions": {"base_value": float(contrib[-1]), "fields": by_field},
    }
