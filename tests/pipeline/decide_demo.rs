//! The whole pipeline on the bundled demo model (invented data, demo only): outcomes, reason
//! rules, missing-value statements, additivity and byte-for-byte determinism.

use plumbline::{decide_request, LoadedModel};
use serde_json::{json, Value};
use std::path::Path;

fn demo() -> LoadedModel {
    LoadedModel::from_path(Path::new("models/fernhill-logistic.json")).expect("demo model loads")
}

fn request(applicant: Value) -> Value {
    json!({"application_id": "T-1", "applicant": applicant})
}

fn typical() -> Value {
    json!({"requested_amount": 12000, "annual_income": 85000, "debt_to_income": 14.5,
           "revolving_utilization": 22, "months_since_oldest_account": 190, "delinquencies_24m": 0,
           "inquiries_6m": 1, "months_with_employer": 72, "housing": "mortgage",
           "loan_purpose": "home_improvement"})
}

fn with(mut v: Value, key: &str, x: Value) -> Value {
    v[key] = x;
    v
}

/// The recorded service responses in demo-requests/ are what the library decides for the same
/// requests (the service adds only where it recorded them), and deciding twice gives the same
/// bytes.
#[test]
fn library_decisions_match_recorded_service_responses() {
    let model = demo();
    let mut seen = 0;
    for entry in std::fs::read_dir("demo-requests").unwrap() {
        let path = entry.unwrap().path();
        if path.extension().and_then(|e| e.to_str()) != Some("json") {
            continue;
        }
        let pair: Value = serde_json::from_slice(&std::fs::read(&path).unwrap()).unwrap();
        if pair["request"]["path"] != "/v1/decisions" || pair["response"]["status"] != 200 {
            continue;
        }
        let req = &pair["request"]["body"];
        let first = serde_json::to_string(&decide_request(&model, req).unwrap()).unwrap();
        let second = serde_json::to_string(&decide_request(&model, req).unwrap()).unwrap();
        assert_eq!(first, second, "{} is not deterministic", path.display());
        let got: Value = serde_json::from_str(&first).unwrap();
        // The service adds only the record reference (masked in the pairs).
        let mut recorded = pair["response"]["body"].clone();
        let record = recorded.as_object_mut().unwrap().remove("record");
        assert!(
            record.is_some(),
            "{} has no record reference",
            path.display()
        );
        assert_eq!(got, recorded, "{} changed", path.display());
        seen += 1;
    }
    assert!(seen >= 10);
}

#[test]
fn approved_application_has_no_adverse_action_reasons() {
    let d = decide_request(&demo(), &request(typical())).unwrap();
    assert_eq!(d.outcome.name(), "approve");
    assert!(d.reasons.is_empty());
}

#[test]
fn contributions_are_exact_and_dummies_summed_to_fields() {
    let model = demo();
    let d = decide_request(&model, &request(typical())).unwrap();
    let c = &d.contributions;
    let total: f64 = c.base_value + c.fields.iter().map(|f| f.contribution).sum::<f64>();
    assert!((total - c.output).abs() < 1e-12);
    assert!((c.output - d.log_odds).abs() < 1e-15);
    assert_eq!(
        c.fields.len(),
        10,
        "one entry per field, not per dummy column"
    );
    // Hand arithmetic from the artifact: housing = mortgage against the reference mix
    // (own 0.25, mortgage 0.40, other 0.05): -0.35*(1-0.4) - 0.25*(0-0.25) + 0.15*(0-0.05).
    let housing = c.fields.iter().find(|f| f.field == "housing").unwrap();
    let want = -0.35 * (1.0 - 0.4) - 0.25 * (0.0 - 0.25) + 0.15 * (0.0 - 0.05);
    assert!((housing.contribution - want).abs() < 1e-15);
    // Probability = logistic(log-odds).
    assert!((d.probability_of_default - 1.0 / (1.0 + (-d.log_odds).exp())).abs() < 1e-15);
}

#[test]
fn decline_gives_at_most_four_reasons_all_adverse_plus_inquiry_extra() {
    let applicant = json!({"requested_amount": 18000, "annual_income": 31000, "debt_to_income": 41,
        "revolving_utilization": 88, "months_since_oldest_account": 14, "delinquencies_24m": 1,
        "inquiries_6m": 2, "months_with_employer": 4, "housing": "rent", "loan_purpose": "other"});
    let d = decide_request(&demo(), &request(applicant)).unwrap();
    assert_eq!(d.outcome.name(), "decline");
    let model_reasons: Vec<_> = d
        .reasons
        .iter()
        .filter(|r| r.source != plumbline::reasons::ReasonSource::InquiryExtra)
        .collect();
    assert_eq!(model_reasons.len(), 4);
    assert!(d.reasons.iter().all(|r| r.contribution.unwrap() > 0.0));
    for pair in model_reasons.windows(2) {
        assert!(pair[0].contribution >= pair[1].contribution);
    }
    // Inquiries (2 against a reference of 0.8: +0.216) rank below the top four here, so
    // FCRA 15 U.S.C. 1681g(f)(9) has them listed as a fifth factor.
    assert_eq!(d.reasons.len(), 5);
    assert_eq!(d.reasons[4].code, "INQ");
}

#[test]
fn rule_check_reason_comes_first() {
    let d = decide_request(
        &demo(),
        &request(with(typical(), "requested_amount", json!(45000))),
    )
    .unwrap();
    assert_eq!(d.outcome.name(), "refer");
    assert_eq!(d.reasons[0].code, "AMT_LIMIT");
    assert_eq!(d.rules_fired.len(), 1);
    let d = decide_request(
        &demo(),
        &request(with(typical(), "annual_income", json!(11000))),
    )
    .unwrap();
    assert_eq!(
        d.outcome.name(),
        "decline",
        "an income rule declines whatever the model says"
    );
    assert_eq!(d.reasons[0].code, "INC_MIN");
}

#[test]
fn missing_values_are_stated_never_silent() {
    let mut a = typical();
    a.as_object_mut().unwrap().remove("months_with_employer");
    a["revolving_utilization"] = Value::Null;
    let d = decide_request(&demo(), &request(a)).unwrap();
    let m = serde_json::to_value(&d.missing).unwrap();
    assert_eq!(
        m,
        json!([{"field": "revolving_utilization", "treatment": "imputed", "value": 30},
                        {"field": "months_with_employer", "treatment": "imputed", "value": 36}])
    );
}

#[test]
fn every_bad_field_is_named_with_its_rule() {
    let a = json!({"requested_amount": "lots", "annual_income": -5, "debt_to_income": 14.5,
        "months_since_oldest_account": 12.5, "delinquencies_24m": 0, "inquiries_6m": 1,
        "housing": "castle", "loan_purpose": "home_improvement", "ethnicity": "x"});
    let err = decide_request(&demo(), &json!({"applicant": a, "channel": "web"})).unwrap_err();
    let got: Vec<(String, &str)> = err
        .errors
        .iter()
        .map(|e| (e.field.clone(), e.rule))
        .collect();
    for want in [
        ("channel", "unknown_field"),
        ("application_id", "required"),
        ("applicant.ethnicity", "unknown_field"),
        ("applicant.requested_amount", "type"),
        ("applicant.annual_income", "range"),
        ("applicant.months_since_oldest_account", "integer"),
        ("applicant.housing", "level"),
    ] {
        assert!(
            got.contains(&(want.0.to_string(), want.1)),
            "missing {want:?} in {got:?}"
        );
    }
    let err = decide_request(&demo(), &request(json!({}))).unwrap_err();
    assert!(err
        .errors
        .iter()
        .any(|e| e.field == "applicant.annual_income" && e.rule == "required"));
    assert!(decide_request(&demo(), &json!([1, 2])).is_err());
    assert!(decide_request(&demo(), &request(json!("not an object"))).is_err());
}

#[test]
fn range_bounds_are_inclusive() {
    let d = decide_request(
        &demo(),
        &request(with(typical(), "debt_to_income", json!(200))),
    );
    assert!(d.is_ok());
    let e = decide_request(
        &demo(),
        &request(with(typical(), "debt_to_income", json!(200.0001))),
    );
    assert_eq!(e.unwrap_err().errors[0].rule, "range");
}

/// Many requests decided together (`decide_requests`, what `plumbline score` uses: a tree
/// ensemble explains a block of applicants per pass over each tree) give each request the bytes
/// it gets alone, refusals included, on both demo models; with the forest, more requests than
/// one block of the kernel, so blocks and a partial last block are both crossed.
#[test]
fn requests_decided_together_equal_each_decided_alone() {
    for path in [
        "models/fernhill-forest.json",
        "models/fernhill-logistic.json",
    ] {
        let model = LoadedModel::from_path(Path::new(path)).expect("demo model loads");
        let mut requests = Vec::new();
        for i in 0..150u32 {
            let mut applicant = typical();
            applicant["annual_income"] = json!(20_000 + 997 * i);
            applicant["revolving_utilization"] = json!((i * 7) % 101);
            applicant["inquiries_6m"] = json!(i % 6);
            if i % 9 == 0 {
                applicant
                    .as_object_mut()
                    .unwrap()
                    .remove("revolving_utilization");
            }
            if i % 13 == 0 {
                applicant["debt_to_income"] = json!("high"); // refused: not a number
            }
            let mut r = request(applicant);
            r["application_id"] = json!(format!("T-{i}"));
            if i % 17 == 0 {
                r["model"] = json!({"id": "some-other-model"}); // refused: another model
            }
            requests.push(r);
        }
        requests.push(json!({"applicant": typical()})); // refused: no application id
        let together = plumbline::decide::decide_requests(&model, &requests);
        assert_eq!(together.len(), requests.len());
        let (mut given, mut refused) = (0, 0);
        for (request, got) in requests.iter().zip(together) {
            match (got, decide_request(&model, request)) {
                (Ok(a), Ok(b)) => {
                    given += 1;
                    assert_eq!(
                        serde_json::to_string(&a).unwrap(),
                        serde_json::to_string(&b).unwrap()
                    );
                }
                (Err(a), Err(b)) => {
                    refused += 1;
                    assert_eq!(a.to_string(), b.to_string());
                }
                (a, b) => panic!("{path}: together {a:?}, alone {b:?}"),
            }
        }
        assert!(
            given > 100 && refused > 10,
            "{path}: {given} given, {refused} refused"
        );
    }
}
