"""Decide the recorded requests of demo-requests/ through the client that openapi-python-client
generated from the OpenAPI document, and check each answer parses into its generated Decision.

Usage: decide.py URL   (run by tests/contract/client.sh from the repo root)

Talks to the service only through the generated package `plumbline_client` (the
package_name_override in config.yml). Names relied on: `plumbline_client.AuthenticatedClient`,
`plumbline_client.models.Decision`, and the operation modules `post_decision` (POST
/v1/decisions) and `post_batch` (POST /v1/decisions/batch), found under `plumbline_client.api`
whatever tag folder they sit in. The request body classes (DecisionRequest, BatchRequestDoc for
the current document) are read from the `body` annotation of each `sync_detailed`.

What is compared, for each pair with request POST /v1/decisions and response status 200:
- the request model built with `from_dict(request.body)` gives back `request.body` (so what is sent
  is what was recorded);
- the answer is status 200 and `parsed` is a `Decision`;
- `Decision.to_dict()` equals the JSON on the wire exactly (nothing lost or changed in parsing), and
  no parsed object keeps fields in `additional_properties` (each field is declared in the document);
- `to_dict()` equals the recorded `response.body` except `record`. The pair format (see
  demo-requests/README.md) masks only `record.decision_id` and `record.decided_at` (as
  "(varies per decision)") in a decision, because they differ on every run; so `record` is checked
  for the same keys holding non-empty strings, then left out of the comparison.
"""

import importlib
import json
import pkgutil
import sys
import typing
from pathlib import Path

import plumbline_client
import plumbline_client.api
from plumbline_client import AuthenticatedClient
from plumbline_client.models import Decision

SCORING_KEY = "fernhill-demo-scoring-key"  # demo key of models/demo-keys.json, role scoring
PAIRS = Path("demo-requests")


def operation(name):
    """The generated module of an operation id, in whichever api/<tag>/ folder it was put."""
    found = [m.name for m in pkgutil.walk_packages(plumbline_client.api.__path__, "plumbline_client.api.")
             if m.name.rsplit(".", 1)[-1] == name]
    if len(found) != 1:
        sys.exit(f"FAIL: expected one generated module for operation {name!r}, found {found}")
    module = importlib.import_module(found[0])
    body_type = typing.get_type_hints(module.sync_detailed)["body"]
    return module, body_type


def differences(want, got, path="$"):
    """Paths where two JSON values differ (types too: 1 and 1.0 are different here)."""
    if isinstance(want, dict) and isinstance(got, dict):
        for key in sorted(set(want) | set(got)):
            if key not in got:
                yield f"{path}.{key}: missing (recorded {json.dumps(want[key])[:120]})"
            elif key not in want:
                yield f"{path}.{key}: not recorded (got {json.dumps(got[key])[:120]})"
            else:
                yield from differences(want[key], got[key], f"{path}.{key}")
    elif isinstance(want, list) and isinstance(got, list):
        if len(want) != len(got):
            yield f"{path}: {len(got)} items, recorded {len(want)}"
        for i, (w, g) in enumerate(zip(want, got)):
            yield from differences(w, g, f"{path}[{i}]")
    elif type(want) is not type(got) or want != got:
        yield f"{path}: got {json.dumps(got)[:120]}, recorded {json.dumps(want)[:120]}"


def undeclared(value, path="$"):
    """Fields the generated models did not know and kept in additional_properties."""
    extra = getattr(value, "additional_properties", None)
    if isinstance(extra, dict):
        for key in sorted(extra):
            yield f"{path}.{key}"
    if hasattr(value, "__attrs_attrs__"):
        for a in value.__attrs_attrs__:
            if a.name != "additional_properties":
                yield from undeclared(getattr(value, a.name), f"{path}.{a.name}")
    elif isinstance(value, list):
        for i, item in enumerate(value):
            yield from undeclared(item, f"{path}[{i}]")


def check_decision(decision, wire, recorded):
    """Problems with one parsed decision against its wire JSON and its recorded body."""
    problems = []
    if not isinstance(decision, Decision):
        return [f"parsed is {type(decision).__name__}, not the generated Decision"]
    got = decision.to_dict()
    problems += [f"to_dict() differs from the wire: {d}" for d in differences(wire, got)]
    problems += [f"undeclared field {p}" for p in undeclared(decision)]
    # record: same keys as the recorded (masked) one, each a non-empty string; then left out.
    got_record, want_record = got.pop("record", None), dict(recorded).pop("record", None)
    if want_record is not None:
        if not isinstance(got_record, dict) or set(got_record) != set(want_record) or not all(
                isinstance(v, str) and v for v in got_record.values()):
            problems.append(f"record is {got_record!r}, recorded keys {sorted(want_record)}")
    recorded = {k: v for k, v in recorded.items() if k != "record"}
    problems += [f"differs from the recording: {d}" for d in differences(recorded, got)]
    return problems


def main():
    if len(sys.argv) != 2:
        sys.exit(__doc__.split("\n\n")[1])
    client = AuthenticatedClient(base_url=sys.argv[1], token=SCORING_KEY, timeout=30.0,
                                 raise_on_unexpected_status=True)
    post_decision, DecisionBody = operation("post_decision")
    post_batch, BatchBody = operation("post_batch")

    cases = []
    for path in sorted(PAIRS.glob("*.json")):
        pair = json.loads(path.read_text())
        req, resp = pair["request"], pair["response"]
        if req["method"] == "POST" and req["path"] == "/v1/decisions" and resp["status"] == 200:
            cases.append((path.name, req["body"], resp["body"]))
    if not cases:
        sys.exit(f"FAIL: no recorded POST /v1/decisions pair with status 200 in {PAIRS}/")

    failed = []
    for name, body, recorded in cases:
        request = DecisionBody.from_dict(body)
        problems = [f"request model gives back {d}" for d in differences(body, request.to_dict())]
        response = post_decision.sync_detailed(client=client, body=request)
        if response.status_code != 200:
            problems.append(f"status {int(response.status_code)}: {response.content[:300]!r}")
        else:
            problems += check_decision(response.parsed, json.loads(response.content), recorded)
        print(f"{'ok  ' if not problems else 'FAIL'} {name}"
              + (f" ({response.parsed.outcome}, score {response.parsed.score})" if not problems else ""))
        for p in problems:
            print(f"       {p}")
        if problems:
            failed.append(name)

    # One batch of two recorded requests: the first case and the first whose recorded answer has
    # imputed fields (so the MissingField union is parsed inside BatchItem too), each compared with
    # its single-request recording.
    with_missing = next((c for c in cases[1:] if c[2].get("missing")), cases[1 % len(cases)])
    picked = [cases[0], with_missing]
    batch_name = "batch(" + " + ".join(c[0] for c in picked) + ")"
    problems = []
    response = post_batch.sync_detailed(client=client, body=BatchBody.from_dict({"items": [c[1] for c in picked]}))
    if response.status_code != 200:
        problems.append(f"status {int(response.status_code)}: {response.content[:300]!r}")
    else:
        wire = json.loads(response.content)
        results = getattr(response.parsed, "results", None)
        if not isinstance(results, list) or len(results) != len(picked):
            problems.append(f"parsed is {type(response.parsed).__name__} with results {results!r}")
        else:
            problems += [f"to_dict() differs from the wire: {d}" for d in differences(wire, response.parsed.to_dict())]
            for i, (item, (name, _, recorded)) in enumerate(zip(results, picked)):
                if item.status != 200:
                    problems.append(f"item {i} ({name}): status {item.status}")
                    continue
                problems += [f"item {i} ({name}): {p}"
                             for p in check_decision(item.decision, wire["results"][i]["decision"], recorded)]
    print(f"{'ok  ' if not problems else 'FAIL'} {batch_name}")
    for p in problems:
        print(f"       {p}")
    if problems:
        failed.append(batch_name)

    total = len(cases) + 1
    print(f"{total - len(failed)} passed, {len(failed)} failed")
    if failed:
        sys.exit("FAIL: generated client: " + ", ".join(failed))


if __name__ == "__main__":
    main()
