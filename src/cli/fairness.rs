//! `plumbline fairness`: the fair-lending screening report from files, a records export and a
//! group-membership upload, as the service computes it.

use super::EXIT_BAD_INPUT;
use crate::fairness::{membership, Aggregator, DecisionRow, Refer, Report, Settings};
use clap::Args;
use serde_json::Value;
use std::fmt::Write;
use std::path::PathBuf;

#[derive(Debug, Args)]
pub struct FairnessArgs {
    /// A records export: JSON lines (`plumbline records export`) or its CSV form.
    #[arg(long)]
    decisions: PathBuf,
    /// Group memberships: JSON (several dimensions) or CSV (`application_id,group` labels, or
    /// `application_id,G1,G2,...` probabilities).
    #[arg(long)]
    groups: PathBuf,
    /// Name of the dimension a CSV upload describes.
    #[arg(long, default_value = "group")]
    dimension: String,
    /// Control group (default: the largest-rate group of at least the minimum size).
    #[arg(long)]
    control: Option<String>,
    /// How refer outcomes count: not-approved (default), excluded, or final (the underwriter's
    /// final action where one is recorded).
    #[arg(long, default_value = "not-approved")]
    refer: String,
    /// With --refer final: how a referral without a final action counts (not-approved, the
    /// default, or excluded).
    #[arg(long)]
    refer_without_final: Option<String>,
    /// Groups with fewer (effective) applications get no ratio.
    #[arg(long, default_value_t = crate::fairness::report::MIN_GROUP_SIZE)]
    min_group_size: f64,
    /// Tolerance for membership probabilities summing to 1.
    #[arg(long, default_value_t = membership::SUM_TOLERANCE)]
    sum_tolerance: f64,
    /// Print JSON instead of tables.
    #[arg(long)]
    json: bool,
    /// Also write the report as a printable HTML page (tables and SVG charts) here.
    #[arg(long)]
    html: Option<PathBuf>,
}

pub fn run(args: FairnessArgs) -> i32 {
    match report(&args) {
        Ok(r) => {
            if let Some(path) = &args.html {
                let page = crate::fairness::html::page(&r, "Fair-lending screening");
                if let Err(e) = std::fs::write(path, page) {
                    eprintln!("error: cannot write {}: {e}", path.display());
                    return super::EXIT_FAILURE;
                }
            }
            if args.json {
                if let Err(code) = super::print_pretty(&r) {
                    return code;
                }
            } else {
                print!("{}", text(&r));
            }
            0
        }
        Err(e) => {
            eprintln!("error: {e}");
            EXIT_BAD_INPUT
        }
    }
}

fn report(args: &FairnessArgs) -> Result<Report, String> {
    let refer = match args.refer.as_str() {
        "not-approved" => Refer::NotApproved,
        "excluded" => Refer::Excluded,
        "final" => Refer::Final,
        _ => return Err("--refer must be not-approved, excluded or final".into()),
    };
    let refer_without_final = match (refer, args.refer_without_final.as_deref()) {
        (Refer::Final, None | Some("not-approved")) => Refer::NotApproved,
        (Refer::Final, Some("excluded")) => Refer::Excluded,
        (Refer::Final, Some(_)) => {
            return Err("--refer-without-final must be not-approved or excluded".into())
        }
        (_, Some(_)) => return Err("--refer-without-final is only for --refer final".into()),
        (_, None) => Refer::NotApproved,
    };
    if !(args.min_group_size.is_finite() && args.min_group_size >= 1.0) {
        return Err("--min-group-size must be at least 1".into());
    }
    if !(args.sum_tolerance.is_finite() && (0.0..0.5).contains(&args.sum_tolerance)) {
        return Err("--sum-tolerance must be from 0 to 0.5".into());
    }
    let read = |p: &PathBuf| {
        std::fs::read_to_string(p).map_err(|e| format!("cannot read {}: {e}", p.display()))
    };
    let dims = if args.groups.extension().is_some_and(|e| e == "json") {
        let file = std::fs::File::open(&args.groups)
            .map_err(|e| format!("cannot read {}: {e}", args.groups.display()))?;
        membership::from_json(file, args.sum_tolerance)
    } else {
        let groups_text = read(&args.groups)?;
        membership::from_csv(&groups_text, &args.dimension, args.sum_tolerance).map(|d| vec![d])
    }
    .map_err(|e| format!("{}: {e}", args.groups.display()))?;
    let settings = Settings {
        control: args.control.clone(),
        refer,
        refer_without_final,
        min_group_size: args.min_group_size,
        ..Settings::default()
    };
    let mut agg = Aggregator::new(&dims, settings);
    let text = read(&args.decisions)?;
    let bar = super::progress::Bar::new();
    crate::progress::Progress::stage(&bar, "reading decisions", None);
    let bad = |n: usize, what: &str| format!("{} line {}: {what}", args.decisions.display(), n + 1);
    if args.decisions.extension().is_some_and(|e| e == "csv") {
        let table = crate::tabular::read(&text)
            .map_err(|e| format!("{}: {e}", args.decisions.display()))?;
        let col = |name: &str| {
            table
                .column(name)
                .ok_or_else(|| format!("{}: no column {name}", args.decisions.display()))
        };
        let (id, outcome, pd, score) = (
            col("application_id")?,
            col("outcome")?,
            col("probability_of_default")?,
            col("score")?,
        );
        // Exports written before final actions existed have no such column.
        let final_at = table.column("final_action");
        if final_at.is_none() && refer == Refer::Final {
            eprintln!(
                "warning: {} has no final_action column (an export from before final actions were recorded?); every referral counts as having none",
                args.decisions.display()
            );
        }
        let bad = |n: usize, what: &str| format!("{} row {n}: {what}", args.decisions.display());
        for record in table {
            let (n, record) = record.map_err(|e| format!("{}: {e}", args.decisions.display()))?;
            let cell = |i: usize| record.get(i).map(crate::records::export::unguard);
            let num = |i: usize| {
                cell(i)
                    .and_then(|c| c.parse::<f64>().ok())
                    .ok_or_else(|| bad(n, "not a decision summary row"))
            };
            bar.inc(1);
            agg.add(&DecisionRow {
                application_id: cell(id).unwrap_or_default(),
                outcome: cell(outcome).unwrap_or_default(),
                final_action: final_at.and_then(cell).filter(|a| !a.is_empty()),
                probability: num(pd)?,
                score: num(score)?,
            });
        }
    } else {
        for (n, line) in text
            .lines()
            .enumerate()
            .filter(|(_, l)| !l.trim().is_empty())
        {
            let r: Value =
                serde_json::from_str(line).map_err(|e| bad(n, &format!("not JSON: {e}")))?;
            let (Some(id), Some(outcome), Some(pd), Some(score)) = (
                r["application_id"].as_str(),
                r["outcome"].as_str(),
                r["probability_of_default"].as_f64(),
                r["score"].as_f64(),
            ) else {
                return Err(bad(n, "not a decision record (application_id, outcome, probability_of_default, score)"));
            };
            bar.inc(1);
            agg.add(&DecisionRow {
                application_id: id,
                outcome,
                final_action: r["final_action"]["action"].as_str(),
                probability: pd,
                score,
            });
        }
    }
    Ok(agg.finish())
}

fn pct(v: Option<f64>) -> String {
    v.map_or("-".into(), |x| format!("{:.1}%", 100.0 * x))
}

fn num(v: Option<f64>, places: usize) -> String {
    v.map_or("-".into(), |x| format!("{x:.places$}"))
}

/// Tables for people.
pub fn text(r: &Report) -> String {
    let mut s = String::new();
    let _ = writeln!(
        s,
        "fair-lending screening: {} decisions (referrals {})",
        r.decisions,
        match r.refer {
            Refer::NotApproved => "counted as not approved".to_string(),
            Refer::Excluded => format!("excluded: {}", r.referrals_excluded),
            Refer::Final => format!(
                "as final actions; {} without one, {} left out",
                r.referrals_without_final_action.unwrap_or(0),
                r.referrals_excluded
            ),
        }
    );
    for d in &r.dimensions {
        let _ = writeln!(
            s,
            "\n{} ({}) — control: {}",
            d.name,
            d.kind.name(),
            d.control_group.as_deref().unwrap_or("none")
        );
        if let Some(n) = &d.note {
            let _ = writeln!(s, "  NOTE: {n}");
        }
        let _ = writeln!(
            s,
            "  {:<16} {:>12} {:>12} {:>8} {:>7} {:<22} {:>10} {:>10} {:>8}",
            "group",
            "applications",
            "approvals",
            "rate",
            "AIR",
            "four-fifths",
            "Fisher p",
            "z p",
            "SMD"
        );
        for g in &d.groups {
            let _ = writeln!(
                s,
                "  {:<16} {:>12.1} {:>12.1} {:>8} {:>7} {:<22} {:>10} {:>10} {:>8}",
                g.group,
                g.applications,
                g.approvals,
                pct(g.approval_rate),
                num(g.adverse_impact_ratio, 3),
                g.four_fifths,
                num(g.fisher_p, 4),
                num(g.z_p, 4),
                num(g.score_smd, 3)
            );
        }
        let _ = writeln!(
            s,
            "  decisions without group data: {}; upload rows matching no decision: {}",
            d.decisions_without_group_data, d.unknown_application_ids
        );
        if !d.groups_without_applications.is_empty() {
            let _ = writeln!(
                s,
                "  groups with no applications: {}",
                d.groups_without_applications.join(", ")
            );
        }
    }
    let _ = writeln!(s, "\n{}", r.caution);
    s
}
