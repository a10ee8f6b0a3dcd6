//! Fisher's exact test and the two-proportion z test against scipy 1.17.1 `fisher_exact` and
//! statsmodels 0.15.0 `proportions_ztest` (tests/reference/fixtures/fairness.json, regenerated
//! live by tests/reference/regen.sh in CI), and the fewest extra approvals that remove
//! significance, found the same way with scipy.

use plumbline::fairness::membership::{Dimension, Kind, WHOLE};
use plumbline::fairness::stats;
use plumbline::fairness::{Aggregator, DecisionRow, Settings};
use serde_json::Value;

fn fixture() -> Value {
    serde_json::from_str(
        &std::fs::read_to_string("tests/reference/fixtures/fairness.json").unwrap(),
    )
    .unwrap()
}

fn close(a: f64, b: f64, rel: f64) -> bool {
    (a - b).abs() <= rel * b.abs().max(1e-300)
}

#[test]
fn fisher_and_z_agree_with_scipy_and_statsmodels() {
    let doc = fixture();
    assert_eq!(doc["versions"]["scipy"], "1.17.1");
    assert_eq!(doc["versions"]["statsmodels"], "0.15.0");
    for c in doc["cases"].as_array().unwrap() {
        let [a, n, ac, nc] = ["a", "n", "ac", "nc"].map(|k| c[k].as_u64().unwrap());
        let p = stats::fisher_exact(a, n - a, ac, nc - ac);
        let want = c["fisher_p"].as_f64().unwrap();
        // log-gamma factorials: 1e-9 relative on small tables, looser on 100,000-row ones.
        let rel = if n + nc > 50_000 { 1e-6 } else { 1e-9 };
        assert!(close(p, want, rel), "{c}: fisher {p} vs scipy {want}");
        match (
            stats::two_proportion_z(a as f64, n as f64, ac as f64, nc as f64),
            c["z"].as_f64(),
        ) {
            (Some((z, zp)), Some(want_z)) => {
                assert!(close(z, want_z, 1e-12), "{c}: z {z}");
                assert!(close(zp, c["z_p"].as_f64().unwrap(), 1e-9), "{c}: z p {zp}");
            }
            (None, None) => {}
            (got, want) => panic!("{c}: z {got:?} vs statsmodels {want:?}"),
        }
    }
}

/// The report's fewest-approvals figure for each small significant group, as scipy finds it.
#[test]
fn approvals_to_remove_significance_match_scipy() {
    let doc = fixture();
    let mut checked = 0;
    for c in doc["cases"].as_array().unwrap() {
        let [a, n, ac, nc] = ["a", "n", "ac", "nc"].map(|k| c[k].as_u64().unwrap() as usize);
        // Two labelled groups, g and c, decided as the table says.
        let mut members = std::collections::HashMap::new();
        let mut rows = Vec::new();
        for (group, approvals, size) in [(0u16, a, n), (1u16, ac, nc)] {
            for i in 0..size {
                let id = format!("{group}-{i}");
                members.insert(id.clone(), vec![(group, WHOLE)]);
                rows.push((id, if i < approvals { "approve" } else { "decline" }));
            }
        }
        let dims = [Dimension {
            name: "d".into(),
            kind: Kind::Labels,
            groups: vec!["g".into(), "c".into()],
            members: plumbline::fairness::membership::Members::from_pairs(Kind::Labels, members)
                .unwrap(),
        }];
        let settings = Settings {
            control: Some("c".into()),
            min_group_size: 1.0,
            ..Settings::default()
        };
        let mut agg = Aggregator::new(&dims, settings);
        for (id, outcome) in &rows {
            agg.add(&DecisionRow {
                application_id: id,
                outcome,
                final_action: None,
                probability: 0.1,
                score: 600.0,
            });
        }
        let report = agg.finish();
        let g = &report.dimensions[0].groups[0];
        assert_eq!(
            g.approvals_to_remove_significance,
            c["approvals_to_remove_significance"].as_u64(),
            "{c}"
        );
        checked += usize::from(g.approvals_to_remove_significance.is_some());
    }
    assert!(checked >= 3, "the fixture exercises the search");
}
