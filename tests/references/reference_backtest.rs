//! Back-testing against scipy 1.17.1 and scikit-learn 1.9.1 (tests/reference/fixtures/
//! backtest.json, written by tests/reference/make_backtest.py and regenerated live by
//! tests/reference/regen.sh in CI): the one-sided binomial test (`scipy.stats.binomtest`,
//! alternative "greater"), the Jeffreys interval (`scipy.stats.beta.ppf`), and a whole back-test
//! of a generated book: AUC (`roc_auc_score`), KS (`ks_2samp`), Brier (`brier_score_loss`), and
//! every score band and decile with its test, interval and rating.

use plumbline::monitor::calibration::{binomial_upper_p, jeffreys_interval, BandCheck};
use plumbline::monitor::BackTestTally;
use plumbline::records::{DecisionWithOutcome, Outcome};
use serde_json::Value;

fn fixture() -> Value {
    serde_json::from_str(
        &std::fs::read_to_string("tests/reference/fixtures/backtest.json").unwrap(),
    )
    .unwrap()
}

fn close(a: f64, b: f64, rel: f64) -> bool {
    (a - b).abs() <= rel * b.abs().max(1e-300)
}

#[test]
fn binomial_tail_and_jeffreys_interval_agree_with_scipy() {
    let doc = fixture();
    assert_eq!(doc["versions"]["scipy"], "1.17.1");
    for c in doc["cases"].as_array().unwrap() {
        let (d, n) = (c["defaults"].as_u64().unwrap(), c["n"].as_u64().unwrap());
        let p = c["predicted"].as_f64().unwrap();
        let got = binomial_upper_p(d, n, p).unwrap();
        let want = c["binomial_p"].as_f64().unwrap();
        // statrs's regularised incomplete beta: 1e-9 relative, tails included.
        assert!(
            close(got, want, 1e-9),
            "{c}: binomial {got} vs scipy {want}"
        );
        let (lo, hi) = jeffreys_interval(d, n).unwrap();
        let want = c["jeffreys"].as_array().unwrap();
        let (wlo, whi) = (want[0].as_f64().unwrap(), want[1].as_f64().unwrap());
        assert!(
            close(lo, wlo, 1e-8) || (lo - wlo).abs() < 1e-14,
            "{c}: lower {lo} vs scipy {wlo}"
        );
        assert!(close(hi, whi, 1e-8), "{c}: upper {hi} vs scipy {whi}");
    }
}

fn check_bands(what: &str, got: &[BandCheck], want: &Value) {
    let want = want.as_array().unwrap();
    assert_eq!(got.len(), want.len(), "{what}: band count");
    for (g, w) in got.iter().zip(want) {
        assert_eq!(g.label, w["label"].as_str().unwrap(), "{what}");
        assert_eq!(
            g.decisions,
            w["decisions"].as_u64().unwrap(),
            "{what} {}",
            g.label
        );
        assert_eq!(
            g.defaults,
            w["defaults"].as_u64().unwrap(),
            "{what} {}",
            g.label
        );
        assert!(
            close(g.expected_rate, w["expected_rate"].as_f64().unwrap(), 1e-12),
            "{what} {}",
            g.label
        );
        let p = w["binomial_p"].as_f64().unwrap();
        assert!(
            close(g.binomial_p.unwrap(), p, 1e-8),
            "{what} {}: p {:?} vs scipy {p}",
            g.label,
            g.binomial_p
        );
        let [lo, hi] = g.interval.unwrap();
        let wi = w["interval"].as_array().unwrap();
        assert!(
            close(lo, wi[0].as_f64().unwrap(), 1e-8) || lo < 1e-12,
            "{what} {}: {lo} vs {}",
            g.label,
            wi[0]
        );
        assert!(
            close(hi, wi[1].as_f64().unwrap(), 1e-8),
            "{what} {}: {hi} vs {}",
            g.label,
            wi[1]
        );
        assert_eq!(
            g.rating,
            w["rating"].as_str().unwrap(),
            "{what} {}",
            g.label
        );
    }
}

#[test]
fn a_whole_back_test_agrees_with_scipy_and_scikit_learn() {
    let doc = fixture();
    let scale = &doc["scale"];
    let mut tally = BackTestTally::new(
        scale["points"].as_f64().unwrap(),
        scale["pdo"].as_f64().unwrap(),
    );
    for (i, row) in doc["book"].as_array().unwrap().iter().enumerate() {
        tally.add(&DecisionWithOutcome {
            decision_id: format!("d{i:05}"),
            decided_at: "2026-01-15T10:00:00.000000Z".into(),
            model_version: "1".into(),
            outcome: Outcome::Approve,
            probability: row["probability"].as_f64().unwrap(),
            score: row["score"].as_i64().unwrap(),
            final_action: None,
            observed: Some((
                row["defaulted"].as_bool().unwrap(),
                "2027-01-20T00:00:00.000000Z".into(),
            )),
        });
    }
    let (report, curve) = tally.finish(("book", "1"), (None, None));
    let want = &doc["expected"];
    assert_eq!(report.with_outcome, 4000);
    assert_eq!(report.defaults, want["defaults"].as_u64().unwrap());
    let d = report.discrimination.as_ref().unwrap();
    let (auc, ks) = (want["auc"].as_f64().unwrap(), want["ks"].as_f64().unwrap());
    assert!(
        (d.auc - auc).abs() < 1e-12,
        "AUC {} vs scikit-learn {auc}",
        d.auc
    );
    assert!((d.gini - (2.0 * auc - 1.0)).abs() < 1e-12);
    assert!((d.ks - ks).abs() < 1e-12, "KS {} vs scipy {ks}", d.ks);
    let brier = want["brier"].as_f64().unwrap();
    assert!(
        (report.brier.unwrap() - brier).abs() < 1e-12,
        "Brier {:?} vs {brier}",
        report.brier
    );
    check_bands("score band", &report.by_score_band, &want["by_score_band"]);
    check_bands("decile", &report.by_decile, &want["by_decile"]);
    // The book's riskier half defaults 30% above prediction: some band must say so.
    assert!(report
        .by_decile
        .iter()
        .any(|b| b.rating == "more_defaults_than_predicted"));
    assert!(report.by_decile.iter().any(|b| b.rating == "consistent"));
    // Every decision sits 12 months from its observation.
    assert_eq!(report.by_months_since_decision.len(), 1);
    assert_eq!(report.by_months_since_decision[0].label, "12 to 17 months");
    assert!(curve.len() > 2);
}
