//! AUC and KS against scikit-learn `roc_auc_score` and scipy `ks_2samp` on seeded scores with
//! ties (tests/reference/fixtures/metrics.json, written by tests/reference/make_metrics.py with
//! the library versions recorded in the file; CI regenerates it live from PyPI).

#[test]
fn auc_and_ks_match_scikit_learn_and_scipy() {
    let fixture: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string("tests/reference/fixtures/metrics.json").unwrap(),
    )
    .unwrap();
    let libs = &fixture["libraries"];
    let cases = fixture["cases"].as_array().unwrap();
    assert_eq!(cases.len(), 3);
    for c in cases {
        let scores: Vec<f64> = c["scores"]
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.as_f64().unwrap())
            .collect();
        let y: Vec<bool> = c["defaulted"]
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.as_bool().unwrap())
            .collect();
        let auc = plumbline::evaluate::auc(&scores, &y).unwrap();
        let ks = plumbline::evaluate::ks(&scores, &y).unwrap();
        let (want_auc, want_ks) = (c["auc"].as_f64().unwrap(), c["ks"].as_f64().unwrap());
        assert!(
            (auc - want_auc).abs() < 1e-12,
            "{}: AUC {auc} vs scikit-learn {} {want_auc}",
            c["name"],
            libs["scikit-learn"]
        );
        assert!(
            (ks - want_ks).abs() < 1e-12,
            "{}: KS {ks} vs scipy {} {want_ks}",
            c["name"],
            libs["scipy"]
        );
    }
}
