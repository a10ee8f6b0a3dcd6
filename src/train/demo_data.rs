//! Invented applications for the demo lender, Fernhill Lending Co-op (personal installment
//! loans), drawn from a documented data-generating process (models/README.md). For demos and
//! tests only: nothing here describes real borrowers.

use crate::rng::Rng;
use std::fmt::Write;

/// Column order of the generated CSV.
pub const HEADER: &str = "application_id,requested_amount,annual_income,debt_to_income,revolving_utilization,\
months_since_oldest_account,delinquencies_24m,inquiries_6m,months_with_employer,housing,loan_purpose,defaulted";

pub const HOUSING: [&str; 4] = ["rent", "own", "mortgage", "other"];
pub const PURPOSE: [&str; 5] = [
    "debt_consolidation",
    "home_improvement",
    "vehicle",
    "medical",
    "other",
];
/// Labels of the synthetic groups for the fairness demo (never model inputs).
pub const GROUPS: [&str; 5] = ["group_1", "group_2", "group_3", "group_4", "group_5"];

/// One generated application; `None` is a missing value.
#[derive(Debug, Clone, PartialEq)]
pub struct Application {
    pub id: String,
    pub requested_amount: f64,
    pub annual_income: f64,
    pub debt_to_income: f64,
    pub revolving_utilization: Option<f64>,
    pub months_since_oldest_account: u32,
    pub delinquencies_24m: u32,
    pub inquiries_6m: u32,
    pub months_with_employer: Option<u32>,
    pub housing: usize,
    pub purpose: usize,
    /// The true probability of default under the generating process.
    pub risk: f64,
    pub defaulted: bool,
    /// Synthetic group-membership probabilities (sum to 1).
    pub groups: [f64; 5],
}

fn round_to(x: f64, step: f64) -> f64 {
    (x / step).round() * step
}

/// Draws one application. The default label follows a logistic process with a non-linearity
/// (short employment), an interaction (debt-to-income x high utilisation) and a missing-value
/// effect (no revolving account), so a linear model cannot capture it all.
pub fn draw(rng: &mut Rng, index: usize) -> Application {
    let income = round_to(
        (60_000f64.ln() + 0.5 * rng.normal())
            .exp()
            .clamp(8_000.0, 500_000.0),
        100.0,
    );
    let history = (rng.gamma(2.2) * 60.0).round().min(600.0) as u32;
    let housing = {
        let owner = ((income / 60_000.0).ln() * 0.8 + (history as f64 / 240.0)).clamp(-2.0, 2.0);
        rng.choose(&[
            1.2 - 0.3 * owner,
            0.5 + 0.2 * owner,
            0.9 + 0.4 * owner,
            0.15,
        ])
    };
    let purpose = rng.choose(&[0.45, 0.15, 0.15, 0.10, 0.15]);
    let requested = round_to(
        (income * 0.2 * (0.45 * rng.normal()).exp()).clamp(1_000.0, 60_000.0),
        500.0,
    );
    let dti = round_to(
        (5.0 + 50.0 * rng.beta(2.0, 4.0) + 3.0 * rng.normal()).clamp(0.0, 200.0),
        0.1,
    );
    let utilization = if rng.bernoulli(0.06) {
        None
    } else {
        Some(round_to((110.0 * rng.beta(1.4, 3.0)).min(150.0), 0.1))
    };
    let util = utilization.unwrap_or(0.0);
    let delinquencies = rng.poisson(0.08 + 0.006 * util) as u32;
    let inquiries = rng.poisson(if history < 36 { 1.8 } else { 0.9 }) as u32;
    let employment = if rng.bernoulli(0.08) {
        None
    } else {
        Some(((rng.gamma(1.3) * 40.0).round() as u32).min(480))
    };

    let mut z = -2.65
        + 0.040 * (dti - 20.0)
        + 0.016 * (util - 30.0)
        + 0.50 * delinquencies as f64
        + 0.14 * inquiries as f64
        - 0.004 * (history as f64 - 120.0)
        - 0.45 * (income / 60_000.0).ln()
        + 0.10 * (requested / income / 0.2).ln();
    if dti > 30.0 && util > 60.0 {
        z += 0.02 * (dti - 30.0); // interaction: stretched on both at once
    }
    match employment {
        Some(m) if m < 12 => z += 0.55, // non-linear: the first year of a job is the risky one
        None => z += 0.25,
        _ => {}
    }
    if utilization.is_none() {
        z += 0.30; // thin file: no revolving account to judge by
    }
    z += [0.15, -0.20, -0.30, 0.25][housing] + [0.0, -0.15, -0.20, 0.30, 0.25][purpose];
    let risk = 1.0 / (1.0 + (-z).exp());
    let defaulted = rng.bernoulli(risk);

    // Group membership (fairness demo only, invented): a proxy-style probability vector tilted
    // toward group_2 at lower incomes and, more strongly, among riskier applicants, so that the
    // screening has a flag to show: on the bundled demo model group_2's adverse impact ratio is
    // about 0.70 (seed 7, 5,000 applications), below four-fifths.
    let tilt = (-(income / 60_000.0).ln()).clamp(-1.0, 1.5);
    let mut g = [
        rng.gamma(2.0),
        rng.gamma(2.0) * (1.0 + 0.6 * tilt.max(0.0)) * (5.0 * risk).exp(),
        rng.gamma(2.0),
        rng.gamma(1.0),
        rng.gamma(1.0),
    ];
    let total: f64 = g.iter().sum();
    // Four places each, rounded down so the last group takes exactly what is left.
    for v in g.iter_mut() {
        *v = (*v / total * 1e4).floor() / 1e4;
    }
    let rest: f64 = g[..4].iter().sum();
    g[4] = ((1.0 - rest) * 1e4).round() / 1e4;

    Application {
        id: format!("FH-DEMO-{:07}", index + 1),
        requested_amount: requested,
        annual_income: income,
        debt_to_income: dti,
        revolving_utilization: utilization,
        months_since_oldest_account: history,
        delinquencies_24m: delinquencies,
        inquiries_6m: inquiries,
        months_with_employer: employment,
        housing,
        purpose,
        risk,
        defaulted,
        groups: g,
    }
}

fn opt<T: std::fmt::Display>(v: Option<T>) -> String {
    v.map_or(String::new(), |v| v.to_string())
}

/// One decimal place, as the generator rounds (and no binary-fraction noise in the file).
fn tenth(v: f64) -> String {
    format!("{v:.1}")
}

/// The applications CSV (header + one line per application).
pub fn applications_csv(rows: usize, seed: u64) -> (String, String) {
    applications_csv_with(rows, seed, &crate::progress::Quiet)
}

/// As [`applications_csv`], counting rows to `progress`.
pub fn applications_csv_with(
    rows: usize,
    seed: u64,
    progress: &dyn crate::progress::Progress,
) -> (String, String) {
    progress.stage("generating applications", Some(rows as u64));
    let mut rng = Rng::new(seed);
    let mut apps = String::with_capacity(rows * 96);
    let mut groups = String::with_capacity(rows * 48);
    let _ = writeln!(apps, "{HEADER}");
    let _ = writeln!(groups, "application_id,{}", GROUPS.join(","));
    for i in 0..rows {
        let a = draw(&mut rng, i);
        let _ = writeln!(
            apps,
            "{},{},{},{},{},{},{},{},{},{},{},{}",
            a.id,
            a.requested_amount as u64,
            a.annual_income as u64,
            tenth(a.debt_to_income),
            opt(a.revolving_utilization.map(tenth)),
            a.months_since_oldest_account,
            a.delinquencies_24m,
            a.inquiries_6m,
            opt(a.months_with_employer),
            HOUSING[a.housing],
            PURPOSE[a.purpose],
            u8::from(a.defaulted)
        );
        let g: Vec<String> = a.groups.iter().map(|p| format!("{p:.4}")).collect();
        let _ = writeln!(groups, "{},{}", a.id, g.join(","));
        if i % 10_000 == 9_999 {
            progress.advance(10_000);
        }
    }
    (apps, groups)
}

/// The same applications as decision requests, one JSON object per line
/// (`{"application_id", "applicant"}`; missing values left out, the outcome column dropped), for
/// `plumbline score` or a batch to the service.
pub fn requests_jsonl(applications_csv: &str) -> String {
    let mut lines = applications_csv.lines();
    let header: Vec<&str> = lines.next().unwrap_or_default().split(',').collect();
    let mut out = String::new();
    for line in lines {
        let cells: Vec<&str> = line.split(',').collect();
        let mut applicant = serde_json::Map::new();
        for (name, cell) in header.iter().zip(&cells).skip(1) {
            if cell.is_empty() || *name == "defaulted" {
                continue;
            }
            let value = match (cell.parse::<i64>(), cell.parse::<f64>()) {
                (Ok(i), _) => serde_json::Value::from(i),
                (_, Ok(x)) => serde_json::Value::from(x),
                _ => serde_json::Value::from(*cell),
            };
            applicant.insert(name.to_string(), value);
        }
        let request = serde_json::json!({"application_id": cells[0], "applicant": applicant});
        let _ = writeln!(out, "{request}");
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn same_seed_same_bytes_other_seed_other_bytes() {
        assert_eq!(applications_csv(500, 7), applications_csv(500, 7));
        assert_ne!(applications_csv(500, 7).0, applications_csv(500, 8).0);
    }

    #[test]
    fn process_has_the_documented_shape() {
        let mut rng = Rng::new(2026);
        let apps: Vec<Application> = (0..20_000).map(|i| draw(&mut rng, i)).collect();
        let rate = apps.iter().filter(|a| a.defaulted).count() as f64 / apps.len() as f64;
        assert!((0.10..=0.15).contains(&rate), "base rate {rate}");
        let missing_util = apps
            .iter()
            .filter(|a| a.revolving_utilization.is_none())
            .count() as f64
            / apps.len() as f64;
        assert!(
            (0.04..=0.08).contains(&missing_util),
            "missing utilisation {missing_util}"
        );
        for a in &apps {
            assert!((0.0..=200.0).contains(&a.debt_to_income));
            assert!((1_000.0..=60_000.0).contains(&a.requested_amount));
            let s: f64 = a.groups.iter().sum();
            assert!(
                (s - 1.0).abs() < 1e-9 && a.groups.iter().all(|&p| p >= 0.0),
                "{:?}",
                a.groups
            );
        }
        // The disparity is built in: group_2's mean membership is higher among lower incomes.
        let mean_g2 = |low: bool| {
            let v: Vec<f64> = apps
                .iter()
                .filter(|a| (a.annual_income < 50_000.0) == low)
                .map(|a| a.groups[1])
                .collect();
            v.iter().sum::<f64>() / v.len() as f64
        };
        assert!(mean_g2(true) > mean_g2(false) + 0.02);
    }
}
