//! The fair-lending report on hand-built books: the four-fifths boundary of 29 CFR 1607.4(D)
//! by exact arithmetic, a hand-worked weighted rate for probabilistic membership, refer
//! handling, unmatched data reported rather than dropped, the cutoff sweep, and bad uploads.

use plumbline::fairness::membership::{self, Dimension, Kind, Members, WHOLE};
use plumbline::fairness::report::GroupResult;
use plumbline::fairness::{Aggregator, DecisionRow, Refer, Report, Settings};
use std::collections::HashMap;

/// A labelled book: for each group, (approvals, applications); ids `group-i`.
fn labelled(groups: &[(&str, usize, usize)], settings: Settings) -> Report {
    let mut members = HashMap::new();
    let mut rows = Vec::new();
    for (gi, (name, approvals, n)) in groups.iter().enumerate() {
        for i in 0..*n {
            let id = format!("{name}-{i}");
            members.insert(id.clone(), vec![(gi as u16, WHOLE)]);
            rows.push((
                id,
                if i < *approvals { "approve" } else { "decline" },
                0.05 + i as f64 / 1e4,
            ));
        }
    }
    let dims = [Dimension {
        name: "d".into(),
        kind: Kind::Labels,
        groups: groups.iter().map(|g| g.0.to_string()).collect(),
        members: Members::from_pairs(Kind::Labels, members).unwrap(),
    }];
    let mut agg = Aggregator::new(&dims, settings);
    for (id, outcome, p) in &rows {
        agg.add(&DecisionRow {
            application_id: id,
            outcome,
            final_action: None,
            probability: *p,
            score: 600.0 - 1000.0 * p,
        });
    }
    agg.finish()
}

fn group<'a>(r: &'a Report, name: &str) -> &'a GroupResult {
    r.dimensions[0]
        .groups
        .iter()
        .find(|g| g.group == name)
        .unwrap()
}

/// 29 CFR 1607.4(D): "a selection rate for any race, sex, or ethnic group which is less than
/// four-fifths (4/5) (or eighty percent) of the rate for the group with the highest rate will
/// generally be regarded ... as evidence of adverse impact". Less than: exactly 4/5 is not.
#[test]
fn four_fifths_boundary_is_exact() {
    // Control 25 of 30; a group at 20 of 30 is exactly 4/5, though in floating point
    // (20/30)/(25/30) = 0.7999999999999999 and a float comparison would flag it.
    let (at, control) = (std::hint::black_box(20.0f64), std::hint::black_box(25.0f64));
    assert!(
        (at / 30.0) / (control / 30.0) < 0.8,
        "the float trap this test guards against"
    );
    let r = labelled(
        &[
            ("control", 25, 30),
            ("at", 20, 30),
            ("below", 19, 30),
            ("above", 21, 30),
        ],
        Settings::default(),
    );
    assert_eq!(
        r.dimensions[0].control_group.as_deref(),
        Some("control"),
        "highest rate"
    );
    assert_eq!(group(&r, "control").four_fifths, "control");
    assert_eq!(group(&r, "at").four_fifths, "not_below_four_fifths");
    assert_eq!(group(&r, "below").four_fifths, "below_four_fifths");
    assert_eq!(group(&r, "above").four_fifths, "not_below_four_fifths");
    // The same boundary at 100 applications: 40 vs 50 of 100.
    let r = labelled(
        &[("control", 50, 100), ("at", 40, 100), ("below", 39, 100)],
        Settings::default(),
    );
    assert_eq!(group(&r, "at").four_fifths, "not_below_four_fifths");
    assert_eq!(group(&r, "below").four_fifths, "below_four_fifths");
    assert!((group(&r, "at").adverse_impact_ratio.unwrap() - 0.8).abs() < 1e-12);
}

/// Worked by hand. Four applications, two groups A and B:
///
/// | application | P(A) | P(B) | outcome |
/// |---|---|---|---|
/// | 1 | 1.0 | 0.0 | approve |
/// | 2 | 0.5 | 0.5 | approve |
/// | 3 | 0.25 | 0.75 | decline |
/// | 4 | 0.25 | 0.75 | approve |
///
/// A: effective applications 1 + 0.5 + 0.25 + 0.25 = 2.0, approvals 1 + 0.5 + 0.25 = 1.75,
/// rate 0.875. B: applications 0.5 + 0.75 + 0.75 = 2.0, approvals 0.5 + 0.75 = 1.25, rate
/// 0.625. Control A (highest); ratio 0.625 / 0.875 = 5/7 = 0.714285..., below four-fifths.
#[test]
fn weighted_rates_follow_the_hand_worked_example() {
    let csv = "application_id,A,B\nFH-1,1.0,0.0\nFH-2,0.5,0.5\nFH-3,0.25,0.75\nFH-4,0.25,0.75\n";
    let dims = [membership::from_csv(csv, "example", membership::SUM_TOLERANCE).unwrap()];
    let settings = Settings {
        min_group_size: 1.0,
        ..Settings::default()
    };
    let mut agg = Aggregator::new(&dims, settings);
    for (id, outcome) in [
        ("FH-1", "approve"),
        ("FH-2", "approve"),
        ("FH-3", "decline"),
        ("FH-4", "approve"),
    ] {
        agg.add(&DecisionRow {
            application_id: id,
            outcome,
            final_action: None,
            probability: 0.05,
            score: 600.0,
        });
    }
    let r = agg.finish();
    let (a, b) = (group(&r, "A"), group(&r, "B"));
    assert_eq!((a.applications, a.approvals), (2.0, 1.75));
    assert_eq!((b.applications, b.approvals), (2.0, 1.25));
    assert_eq!(a.approval_rate, Some(0.875));
    assert_eq!(r.dimensions[0].control_group.as_deref(), Some("A"));
    assert!((b.adverse_impact_ratio.unwrap() - 5.0 / 7.0).abs() < 1e-15);
    assert_eq!(b.four_fifths, "below_four_fifths");
    assert_eq!(b.fisher_p, None, "Fisher's test needs whole counts");
}

#[test]
fn refer_counting_is_a_stated_choice() {
    let mut members = HashMap::new();
    for i in 0..40 {
        members.insert(format!("a{i}"), vec![(0u16, WHOLE)]);
        members.insert(format!("b{i}"), vec![(1u16, WHOLE)]);
    }
    let dims = [Dimension {
        name: "d".into(),
        kind: Kind::Labels,
        groups: vec!["a".into(), "b".into()],
        members: Members::from_pairs(Kind::Labels, members).unwrap(),
    }];
    let run = |refer| {
        let mut agg = Aggregator::new(
            &dims,
            Settings {
                refer,
                ..Settings::default()
            },
        );
        for i in 0..40 {
            // a: 20 approve, 20 refer; b: 20 approve, 20 decline.
            agg.add(&DecisionRow {
                application_id: &format!("a{i}"),
                outcome: if i < 20 { "approve" } else { "refer" },
                final_action: None,
                probability: 0.1,
                score: 600.0,
            });
            agg.add(&DecisionRow {
                application_id: &format!("b{i}"),
                outcome: if i < 20 { "approve" } else { "decline" },
                final_action: None,
                probability: 0.1,
                score: 600.0,
            });
        }
        agg.finish()
    };
    let counted = run(Refer::NotApproved);
    assert_eq!(group(&counted, "a").approval_rate, Some(0.5));
    let excluded = run(Refer::Excluded);
    assert_eq!(excluded.referrals_excluded, 20);
    assert_eq!(group(&excluded, "a").approval_rate, Some(1.0));
    assert_eq!(group(&excluded, "a").applications, 20.0);
}

/// With `refer: final` a referral counts as the underwriter's final action: an approval on
/// review is an approval, a decline a denial, a withdrawn application neither (left out, as
/// Regulation C keeps "withdrawn" apart from approval and denial in the action taken, 12 CFR
/// 1003.4(a)(8), section cited from memory);
/// one with no final action yet counts as the fallback says, and the report says how many.
#[test]
fn referrals_count_as_their_final_actions() {
    let mut members = HashMap::new();
    for i in 0..40 {
        members.insert(format!("a{i}"), vec![(0u16, WHOLE)]);
    }
    let dims = [Dimension {
        name: "d".into(),
        kind: Kind::Labels,
        groups: vec!["a".into()],
        members: Members::from_pairs(Kind::Labels, members).unwrap(),
    }];
    // 20 approvals; 20 referrals: 8 approved on review, 6 declined, 2 withdrawn, 4 pending.
    let final_of = |i: usize| match i {
        20..=27 => Some("approve"),
        28..=33 => Some("decline"),
        34..=35 => Some("withdrawn"),
        _ => None,
    };
    let run = |refer, refer_without_final| {
        let mut agg = Aggregator::new(
            &dims,
            Settings {
                refer,
                refer_without_final,
                ..Settings::default()
            },
        );
        for i in 0..40 {
            agg.add(&DecisionRow {
                application_id: &format!("a{i}"),
                outcome: if i < 20 { "approve" } else { "refer" },
                final_action: final_of(i),
                probability: 0.1,
                score: 600.0,
            });
        }
        agg.finish()
    };
    let r = run(Refer::Final, Refer::NotApproved);
    let a = group(&r, "a");
    assert_eq!((a.approvals, a.applications), (28.0, 38.0));
    assert_eq!(r.referrals_without_final_action, Some(4));
    assert_eq!(r.referrals_excluded, 2, "the withdrawn ones");
    let r = run(Refer::Final, Refer::Excluded);
    let a = group(&r, "a");
    assert_eq!((a.approvals, a.applications), (28.0, 34.0));
    assert_eq!(r.referrals_without_final_action, Some(4));
    assert_eq!(r.referrals_excluded, 6);
    // The other settings ignore final actions, and say nothing of them.
    let r = run(Refer::NotApproved, Refer::NotApproved);
    assert_eq!(group(&r, "a").approvals, 20.0);
    assert_eq!(r.referrals_without_final_action, None);
}

#[test]
fn unmatched_data_small_groups_and_single_groups_are_reported() {
    let csv = "application_id,group\nFH-1,x\nFH-2,x\nFH-GONE,y\n";
    let dims = [membership::from_csv(csv, "d", 0.001).unwrap()];
    let mut agg = Aggregator::new(&dims, Settings::default());
    for id in ["FH-1", "FH-2", "FH-NO-GROUP"] {
        agg.add(&DecisionRow {
            application_id: id,
            outcome: "approve",
            final_action: None,
            probability: 0.05,
            score: 600.0,
        });
    }
    let r = agg.finish();
    let d = &r.dimensions[0];
    assert_eq!(d.decisions_without_group_data, 1);
    assert_eq!(
        (
            d.unknown_application_ids,
            d.unknown_application_ids_listed.clone()
        ),
        (1, vec!["FH-GONE".to_string()])
    );
    assert_eq!(d.groups_without_applications, vec!["y".to_string()]);
    assert!(
        d.note.as_deref().unwrap().contains("only one group"),
        "{:?}",
        d.note
    );
    assert_eq!(
        group(&r, "x").four_fifths,
        "insufficient_data",
        "2 applications < 30"
    );
    assert_eq!(group(&r, "x").adverse_impact_ratio, None);
}

#[test]
fn the_cutoff_sweep_shows_rates_ratios_and_the_approved_book() {
    // Group a's probabilities are lower than b's; at cutoff 0.06 a approves more.
    let r = labelled(
        &[("a", 40, 40), ("b", 40, 40)],
        Settings {
            cutoffs: vec![0.052, 0.06, 0.5],
            ..Settings::default()
        },
    );
    // Probabilities 0.05 + i/1e4 for i in 0..40, the same for both groups: rates equal at each cutoff.
    let sweep = &r.dimensions[0].sweep;
    assert_eq!(sweep.len(), 3);
    let at = |c: usize, g: &str| {
        sweep[c]
            .groups
            .iter()
            .find(|x| x.group == g)
            .unwrap()
            .approval_rate
            .unwrap()
    };
    assert_eq!(at(0, "a"), 20.0 / 40.0, "p < 0.052: i < 20");
    assert_eq!(at(2, "b"), 1.0);
    let all = &r.overall_sweep;
    assert_eq!(all[0].approval_rate, Some(0.5));
    // Mean of 0.05 + i/1e4 over i < 20 = 0.05 + 9.5e-4.
    assert!((all[0].expected_default_rate_of_approved.unwrap() - 0.050_95).abs() < 1e-12);
    assert!(r.caution.contains("not a legal finding"));
}

#[test]
fn bad_uploads_are_named() {
    let e = membership::from_csv("application_id,a,b\nFH-1,0.6,0.6\n", "d", 0.001).unwrap_err();
    assert_eq!((e.row, e.rule), (Some(1), "sum_to_one"));
    let e = membership::from_csv("application_id,a,b\nFH-1,0.5,lots\n", "d", 0.001).unwrap_err();
    assert_eq!(
        (e.row, e.field.as_str(), e.rule),
        (Some(1), "b", "probability")
    );
    let e = membership::from_csv("", "d", 0.001).unwrap_err();
    assert_eq!(e.rule, "not_empty");
    let e = membership::from_csv("application_id,group\nFH-1,x\nFH-1,y\n", "d", 0.001).unwrap_err();
    assert_eq!((e.row, e.rule), (Some(2), "unique"));
    let e = membership::from_json(r#"{"dimensions": []}"#.as_bytes(), 0.001).unwrap_err();
    assert_eq!(e.rule, "required");
    let e = membership::from_json(
        r#"{"dimensions": [{"name": "sex", "rows": [
        {"application_id": "FH-1", "probabilities": {"a": 0.5, "b": 0.2}}]}]}"#
            .as_bytes(),
        0.001,
    )
    .unwrap_err();
    assert_eq!((e.row, e.rule), (Some(1), "sum_to_one"));
    let e =
        membership::from_csv("application_id,a,a,b\nFH-1,0.2,0.3,0.5\n", "d", 0.001).unwrap_err();
    assert_eq!((e.field.as_str(), e.rule), ("a", "unique_group"));
    // A BISG-style file rounded to 4 places passes within the default tolerance.
    assert!(membership::from_csv(
        "application_id,a,b,c\nFH-1,0.3333,0.3333,0.3333\n",
        "d",
        membership::SUM_TOLERANCE
    )
    .is_ok());
}

#[test]
fn the_command_line_reads_an_export_and_an_upload() {
    let dir = std::env::temp_dir().join(format!("plumbline-fair-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let mut decisions = String::new();
    let mut groups = String::from("application_id,group\n");
    for i in 0..80 {
        let (group, outcome) = if i < 40 {
            ("a", if i < 32 { "approve" } else { "decline" })
        } else {
            ("b", if i < 60 { "approve" } else { "decline" })
        };
        decisions.push_str(&format!("{{\"application_id\":\"FH-{i}\",\"outcome\":\"{outcome}\",\"probability_of_default\":0.05,\"score\":600}}\n"));
        groups.push_str(&format!("FH-{i},{group}\n"));
    }
    std::fs::write(dir.join("export.jsonl"), decisions).unwrap();
    std::fs::write(dir.join("groups.csv"), groups).unwrap();
    let out = std::process::Command::new(env!("CARGO_BIN_EXE_plumbline"))
        .args(["fairness", "--json", "--dimension", "synthetic"])
        .arg("--decisions")
        .arg(dir.join("export.jsonl"))
        .arg("--groups")
        .arg(dir.join("groups.csv"))
        .arg("--html")
        .arg(dir.join("report.html"))
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let r: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    // a: 32 of 40 (0.8); b: 20 of 40 (0.5); 0.5 / 0.8 = 0.625 < 4/5.
    assert_eq!(
        r["dimensions"][0]["groups"][1]["four_fifths"],
        "below_four_fifths"
    );
    assert!(std::fs::read_to_string(dir.join("report.html"))
        .unwrap()
        .contains("<svg"));
    let bad = std::process::Command::new(env!("CARGO_BIN_EXE_plumbline"))
        .args(["fairness", "--refer", "sometimes"])
        .arg("--decisions")
        .arg(dir.join("export.jsonl"))
        .arg("--groups")
        .arg(dir.join("groups.csv"))
        .output()
        .unwrap();
    assert_eq!(bad.status.code(), Some(2));
}

/// Uploads as spreadsheets save them: a byte-order mark, CRLF line ends, quoted group names
/// holding commas and quotes, a blank line (RFC 4180, read with the csv crate).
#[test]
fn spreadsheet_csv_uploads_read_as_written() {
    let text = "\u{feff}application_id,\"Group A, north\",\"Group \"\"B\"\"\"\r\n\
                FH-1,0.25,0.75\r\n\r\n\"FH-2\",1,0\r\n";
    let d = membership::from_csv(text, "region", 0.001).unwrap();
    assert_eq!(d.groups, ["Group A, north", "Group \"B\""]);
    let weights = |id| Vec::from_iter(d.members.weights(d.members.find(id).unwrap()));
    assert_eq!(weights("FH-1"), vec![(0, 250_000_000), (1, 750_000_000)]);
    assert_eq!(weights("FH-2"), vec![(0, 1_000_000_000)]);
    // 64 characters is the limit, not 64 bytes (found by schemathesis 4.32.5: 40 x "é" refused).
    let accents = format!("application_id,group\nFH-1,{}\n", "é".repeat(64));
    assert!(membership::from_csv(&accents, "d", 0.001).is_ok());
    let labels = "application_id,group\r\nFH-1,\"x, y\"\r\n";
    let d = membership::from_csv(labels, "d", 0.001).unwrap();
    assert_eq!(d.groups, ["x, y"]);
}

/// `plumbline fairness --refer final` over the CSV export's final-action columns; the fallback
/// option alone is refused, as the service refuses it.
#[test]
fn the_command_line_counts_final_actions_from_a_csv_export() {
    let dir = std::env::temp_dir().join(format!("plumbline-final-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    // The header `plumbline records export --format csv` writes.
    let mut csv = String::from("decision_id,application_id,idempotency_key,received_at,decided_at,model_id,model_version,model_sha256,outcome,probability_of_default,score,reason_codes,final_action,final_action_at,final_action_by,final_reason_codes\n");
    let mut groups = String::from("application_id,group\n");
    // 10 approvals, 10 referrals: 6 approved on review, 2 declined, 2 pending.
    for i in 0..20 {
        let (outcome, fin) = match i {
            0..=9 => ("approve", ""),
            10..=15 => ("refer", "approve"),
            16..=17 => ("refer", "decline"),
            _ => ("refer", ""),
        };
        csv.push_str(&format!(
            "d{i},FH-{i},,2026-01-05T10:00:00Z,2026-01-05T10:00:00Z,m,1,abc,{outcome},0.05,600,,{fin},,,\n"
        ));
        groups.push_str(&format!("FH-{i},a\n"));
    }
    std::fs::write(dir.join("export.csv"), csv).unwrap();
    std::fs::write(dir.join("groups.csv"), groups).unwrap();
    let run = |extra: &[&str]| {
        std::process::Command::new(env!("CARGO_BIN_EXE_plumbline"))
            .args(["fairness", "--json", "--min-group-size", "1"])
            .args(extra)
            .arg("--decisions")
            .arg(dir.join("export.csv"))
            .arg("--groups")
            .arg(dir.join("groups.csv"))
            .output()
            .unwrap()
    };
    let out = run(&["--refer", "final", "--refer-without-final", "excluded"]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let r: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let g = &r["dimensions"][0]["groups"][0];
    assert_eq!(
        (g["approvals"].as_f64(), g["applications"].as_f64()),
        (Some(16.0), Some(18.0))
    );
    assert_eq!(r["referrals_without_final_action"], 2);
    let bad = run(&["--refer-without-final", "excluded"]);
    assert!(
        !bad.status.success()
            && String::from_utf8_lossy(&bad.stderr).contains("only for --refer final"),
        "{}",
        String::from_utf8_lossy(&bad.stderr)
    );
}
