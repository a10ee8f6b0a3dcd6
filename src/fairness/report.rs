//! The fair-lending screening report: approval rates per group, adverse impact ratios against a
//! control group (29 CFR 1607.4(D): by default the group with the highest rate), the
//! four-fifths flag by exact arithmetic on the counts, significance, standardized mean
//! differences, and a sweep of approve cutoffs. Decisions are aggregated as they stream past;
//! only the uploaded memberships are held in memory.

use super::membership::{Dimension, Kind, WHOLE};
use super::stats::{self, Moments};
use serde::Serialize;

/// Every report carries this.
pub const CAUTION: &str = "A screening statistic for the people who decide, not a legal finding. Adverse impact ratios and significance tests show where to look; they neither establish nor rule out discrimination under ECOA / Regulation B or other law. Memberships from proxy methods are estimates. Review with compliance counsel.";

/// Groups smaller than this (applications, or effective applications) get no ratio.
pub const MIN_GROUP_SIZE: f64 = 30.0;
/// Significance level of the tests.
pub const ALPHA: f64 = 0.05;
/// Groups up to this size get the approvals that would remove significance (labels only).
pub const SMALL_GROUP: u64 = 1_000;
/// Unknown application ids listed in full (the rest are counted).
pub const LISTED_UNKNOWN: usize = 50;

/// How refer outcomes count.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Refer {
    /// A referral is not an approval (the default: it is not credit granted).
    NotApproved,
    /// Referrals are left out of every count.
    Excluded,
    /// A referral counts as its underwriter's final action where one is recorded (approve,
    /// decline; a withdrawn application is left out); one without counts as
    /// `Settings::refer_without_final` says.
    Final,
}

#[derive(Debug, Clone)]
pub struct Settings {
    /// A named control group; `None`: the sufficiently large group with the highest rate.
    pub control: Option<String>,
    pub refer: Refer,
    /// With `Refer::Final`, how a referral with no final action counts (`NotApproved` or
    /// `Excluded`).
    pub refer_without_final: Refer,
    pub min_group_size: f64,
    /// Approve cutoffs (probability of default below the cutoff) for the sweep.
    pub cutoffs: Vec<f64>,
}

impl Default for Settings {
    fn default() -> Self {
        Settings {
            control: None,
            refer: Refer::NotApproved,
            refer_without_final: Refer::NotApproved,
            min_group_size: MIN_GROUP_SIZE,
            cutoffs: (2..=30).map(|c| c as f64 / 100.0).collect(),
        }
    }
}

/// One decision, as far as the report needs it.
pub struct DecisionRow<'a> {
    pub application_id: &'a str,
    pub outcome: &'a str,
    /// The final action recorded on a referral (`approve`, `decline`, `withdrawn`), if any.
    pub final_action: Option<&'a str>,
    pub probability: f64,
    pub score: f64,
}

#[derive(Debug, Clone, Default)]
struct GroupSums {
    /// Applications and approvals in billionths (exact).
    applications: u128,
    approvals: u128,
    score: Moments,
    probability: Moments,
    /// Per sweep cutoff: approvals (billionths) if approving below that cutoff.
    sweep_approvals: Vec<u128>,
}

struct DimensionSums<'d> {
    dim: &'d Dimension,
    groups: Vec<GroupSums>,
    /// Per member (upload order): whether a decision in scope matched it.
    matched: Vec<bool>,
    decisions_without_group: u64,
}

/// Streams decisions into per-group sums.
pub struct Aggregator<'d> {
    settings: Settings,
    dims: Vec<DimensionSums<'d>>,
    decisions: u64,
    referrals_excluded: u64,
    referrals_without_final: u64,
    /// Overall, per cutoff: (approvals, summed probability of default of the approved).
    sweep_all: Vec<(u64, f64)>,
}

impl<'d> Aggregator<'d> {
    pub fn new(dims: &'d [Dimension], settings: Settings) -> Self {
        let n = settings.cutoffs.len();
        Aggregator {
            dims: dims
                .iter()
                .map(|d| DimensionSums {
                    dim: d,
                    groups: vec![
                        GroupSums {
                            sweep_approvals: vec![0; n],
                            ..Default::default()
                        };
                        d.groups.len()
                    ],
                    matched: vec![false; d.members.len()],
                    decisions_without_group: 0,
                })
                .collect(),
            sweep_all: vec![(0, 0.0); n],
            settings,
            decisions: 0,
            referrals_excluded: 0,
            referrals_without_final: 0,
        }
    }

    pub fn add(&mut self, d: &DecisionRow) {
        // What the application's outcome counts as, by the refer setting.
        let outcome = match (d.outcome, self.settings.refer, d.final_action) {
            ("refer", Refer::Excluded, _) => None,
            ("refer", Refer::Final, Some("approve")) => Some(true),
            ("refer", Refer::Final, Some("decline")) => Some(false),
            ("refer", Refer::Final, Some(_)) => None,
            ("refer", Refer::Final, None) => {
                self.referrals_without_final += 1;
                (self.settings.refer_without_final != Refer::Excluded).then_some(false)
            }
            (o, _, _) => Some(o == "approve"),
        };
        let Some(approved) = outcome else {
            // Left out of the counts, yet its upload rows did match a decision.
            self.referrals_excluded += 1;
            for ds in &mut self.dims {
                if let Some(m) = ds.dim.members.find(d.application_id) {
                    ds.matched[m] = true;
                }
            }
            return;
        };
        self.decisions += 1;
        for (c, cutoff) in self.settings.cutoffs.iter().enumerate() {
            if d.probability < *cutoff {
                self.sweep_all[c].0 += 1;
                self.sweep_all[c].1 += d.probability;
            }
        }
        for ds in &mut self.dims {
            let Some(m) = ds.dim.members.find(d.application_id) else {
                ds.decisions_without_group += 1;
                continue;
            };
            ds.matched[m] = true;
            for (g, w) in ds.dim.members.weights(m) {
                let s = &mut ds.groups[g as usize];
                s.applications += u128::from(w);
                if approved {
                    s.approvals += u128::from(w);
                }
                let wf = w as f64 / WHOLE as f64;
                s.score.add(wf, d.score);
                s.probability.add(wf, d.probability);
                for (c, cutoff) in self.settings.cutoffs.iter().enumerate() {
                    if d.probability < *cutoff {
                        s.sweep_approvals[c] += u128::from(w);
                    }
                }
            }
        }
    }

    pub fn finish(self) -> Report {
        let settings = self.settings;
        let dimensions = self
            .dims
            .into_iter()
            .map(|ds| dimension_result(ds, &settings))
            .collect();
        Report {
            caution: CAUTION,
            decisions: self.decisions,
            referrals_excluded: self.referrals_excluded,
            referrals_without_final_action: (settings.refer == Refer::Final)
                .then_some(self.referrals_without_final),
            refer: settings.refer,
            refer_without_final_action: (settings.refer == Refer::Final)
                .then_some(settings.refer_without_final),
            min_group_size: settings.min_group_size,
            significance_level: ALPHA,
            sweep_rule: "approve when the recorded probability of default is below the cutoff; policy rules and the refer band are not applied",
            overall_sweep: (settings.cutoffs.iter().zip(&self.sweep_all))
                .map(|(&cutoff, &(n, pd))| OverallPoint {
                    cutoff,
                    approval_rate: ratio(n as f64, self.decisions as f64),
                    expected_default_rate_of_approved: ratio(pd, n as f64),
                })
                .collect(),
            dimensions,
        }
    }
}

fn ratio(a: f64, b: f64) -> Option<f64> {
    (b > 0.0).then(|| a / b)
}

fn whole(x: u128) -> f64 {
    x as f64 / WHOLE as f64
}

#[derive(Debug, Clone, Serialize)]
pub struct Report {
    pub caution: &'static str,
    /// Decisions counted (referrals left out when excluded).
    pub decisions: u64,
    /// Referrals left out (all with `excluded`; withdrawn ones, and with the setting those
    /// without a final action, with `final`).
    pub referrals_excluded: u64,
    /// With `final`: referrals no final action was recorded for.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub referrals_without_final_action: Option<u64>,
    pub refer: Refer,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub refer_without_final_action: Option<Refer>,
    pub min_group_size: f64,
    pub significance_level: f64,
    pub sweep_rule: &'static str,
    pub overall_sweep: Vec<OverallPoint>,
    pub dimensions: Vec<DimensionResult>,
}

#[derive(Debug, Clone, Serialize)]
pub struct OverallPoint {
    pub cutoff: f64,
    pub approval_rate: Option<f64>,
    /// Mean recorded probability of default of the applications approved at this cutoff.
    pub expected_default_rate_of_approved: Option<f64>,
}

#[derive(Debug, Clone, Serialize)]
pub struct DimensionResult {
    pub name: String,
    pub kind: Kind,
    /// `None` when no group is large enough to compare with (or only one group has data).
    pub control_group: Option<String>,
    /// How the control was chosen.
    pub control_rule: &'static str,
    pub groups: Vec<GroupResult>,
    /// Decisions whose application id has no row in this dimension's upload.
    pub decisions_without_group_data: u64,
    /// Upload rows whose application id matched no decision in scope: count and the first ids.
    pub unknown_application_ids: u64,
    pub unknown_application_ids_listed: Vec<String>,
    pub groups_without_applications: Vec<String>,
    /// Set when a comparison is impossible (one group, or no control), in words.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub note: Option<String>,
    pub sweep: Vec<SweepPoint>,
}

#[derive(Debug, Clone, Serialize)]
pub struct GroupResult {
    pub group: String,
    /// Applications (effective: the sum of membership probabilities).
    pub applications: f64,
    pub approvals: f64,
    pub approval_rate: Option<f64>,
    /// `control`, `below_four_fifths`, `not_below_four_fifths`, `insufficient_data`,
    /// `no_applications` or `no_control`.
    pub four_fifths: &'static str,
    pub adverse_impact_ratio: Option<f64>,
    pub ratio_ci95: Option<[f64; 2]>,
    /// Fisher's exact test, two-sided (labels only: it needs whole counts).
    pub fisher_p: Option<f64>,
    /// Pooled two-proportion z test against the control.
    pub z: Option<f64>,
    pub z_p: Option<f64>,
    pub significant: Option<bool>,
    /// For small groups significantly below the control: how many more approvals would make
    /// Fisher's p at least the significance level.
    pub approvals_to_remove_significance: Option<u64>,
    /// Standardized mean differences against the control (score; probability of default).
    pub score_smd: Option<f64>,
    pub probability_smd: Option<f64>,
}

#[derive(Debug, Clone, Serialize)]
pub struct SweepPoint {
    pub cutoff: f64,
    pub groups: Vec<SweepGroup>,
}

#[derive(Debug, Clone, Serialize)]
pub struct SweepGroup {
    pub group: String,
    pub approval_rate: Option<f64>,
    pub ratio: Option<f64>,
    pub below_four_fifths: Option<bool>,
}

/// a/n < (b/m) * 4/5, exactly.
fn below_four_fifths(a: u128, n: u128, b: u128, m: u128) -> bool {
    5 * a * m < 4 * b * n
}

fn dimension_result(ds: DimensionSums, settings: &Settings) -> DimensionResult {
    let dim = ds.dim;
    let g = &ds.groups;
    let big = |i: usize| whole(g[i].applications) >= settings.min_group_size;
    let (control, rule) = match &settings.control {
        Some(name) => (
            dim.groups.iter().position(|x| x == name),
            "named in the request",
        ),
        None => {
            // The highest rate among large-enough groups, compared exactly; ties to the first.
            let mut best: Option<usize> = None;
            for i in (0..g.len()).filter(|&i| big(i)) {
                if best.is_none_or(|b| {
                    g[i].approvals * g[b].applications > g[b].approvals * g[i].applications
                }) {
                    best = Some(i);
                }
            }
            (best, "the group with the highest approval rate among groups of at least the minimum size (29 CFR 1607.4(D))")
        }
    };
    let with_data = (0..g.len()).filter(|&i| g[i].applications > 0).count();
    let note = if dim.groups.len() < 2 || with_data < 2 {
        Some("only one group has applications: there is nothing to compare".to_string())
    } else if control.is_none() {
        Some(match &settings.control {
            Some(name) => format!("the control group {name} is not in this dimension"),
            None => "no group reaches the minimum size, so none can be the control".into(),
        })
    } else {
        None
    };
    let groups = (0..g.len())
        .map(|i| group_result(dim, g, i, control, big(i)))
        .collect();
    let sweep = settings
        .cutoffs
        .iter()
        .enumerate()
        .map(|(c, &cutoff)| SweepPoint {
            cutoff,
            groups: (0..g.len())
                .map(|i| {
                    let rate = ratio(whole(g[i].sweep_approvals[c]), whole(g[i].applications));
                    let vs = control.filter(|&k| k != i && big(i) && g[k].sweep_approvals[c] > 0);
                    SweepGroup {
                        group: dim.groups[i].clone(),
                        approval_rate: rate,
                        ratio: vs.and_then(|k| {
                            Some(
                                rate?
                                    / ratio(
                                        whole(g[k].sweep_approvals[c]),
                                        whole(g[k].applications),
                                    )?,
                            )
                        }),
                        below_four_fifths: vs.map(|k| {
                            below_four_fifths(
                                g[i].sweep_approvals[c],
                                g[i].applications,
                                g[k].sweep_approvals[c],
                                g[k].applications,
                            )
                        }),
                    }
                })
                .collect(),
        })
        .collect();
    let unmatched = (0..dim.members.len()).filter(|&m| !ds.matched[m]);
    let unknown_count = unmatched.clone().count() as u64;
    // The first ids in id order, without copying them all.
    let mut unknown: Vec<&str> = Vec::with_capacity(LISTED_UNKNOWN + 1);
    for m in unmatched {
        let id = dim.members.id(m);
        if unknown.len() < LISTED_UNKNOWN || unknown.last().is_some_and(|l| id < *l) {
            let at = unknown.partition_point(|u| *u < id);
            unknown.insert(at, id);
            unknown.truncate(LISTED_UNKNOWN);
        }
    }
    let unknown: Vec<String> = unknown.into_iter().map(str::to_string).collect();
    DimensionResult {
        name: dim.name.clone(),
        kind: dim.kind,
        control_group: control
            .filter(|_| note.is_none())
            .map(|k| dim.groups[k].clone()),
        control_rule: rule,
        groups,
        decisions_without_group_data: ds.decisions_without_group,
        unknown_application_ids: unknown_count,
        unknown_application_ids_listed: unknown,
        groups_without_applications: (0..g.len())
            .filter(|&i| g[i].applications == 0)
            .map(|i| dim.groups[i].clone())
            .collect(),
        note,
        sweep,
    }
}

fn group_result(
    dim: &Dimension,
    g: &[GroupSums],
    i: usize,
    control: Option<usize>,
    big: bool,
) -> GroupResult {
    let s = &g[i];
    let (n, a) = (whole(s.applications), whole(s.approvals));
    let mut r = GroupResult {
        group: dim.groups[i].clone(),
        applications: n,
        approvals: a,
        approval_rate: ratio(a, n),
        four_fifths: "no_control",
        adverse_impact_ratio: None,
        ratio_ci95: None,
        fisher_p: None,
        z: None,
        z_p: None,
        significant: None,
        approvals_to_remove_significance: None,
        score_smd: None,
        probability_smd: None,
    };
    if s.applications == 0 {
        r.four_fifths = "no_applications";
        return r;
    }
    if !big {
        r.four_fifths = "insufficient_data";
        return r;
    }
    let Some(k) = control else { return r };
    if k == i {
        r.four_fifths = "control";
        return r;
    }
    let c = &g[k];
    let (nc, ac) = (whole(c.applications), whole(c.approvals));
    r.adverse_impact_ratio = ratio(a / n, ac / nc);
    r.four_fifths = if c.approvals == 0 {
        "no_control"
    } else if below_four_fifths(s.approvals, s.applications, c.approvals, c.applications) {
        "below_four_fifths"
    } else {
        "not_below_four_fifths"
    };
    r.ratio_ci95 = stats::ratio_ci95(a, n, ac, nc).map(|(lo, hi)| [lo, hi]);
    if let Some((z, p)) = stats::two_proportion_z(a, n, ac, nc) {
        r.z = Some(z);
        r.z_p = Some(p);
    }
    if dim.kind == Kind::Labels {
        let count = |x: u128| (x / u128::from(WHOLE)) as u64;
        let (ag, ng, acc, ncc) = (
            count(s.approvals),
            count(s.applications),
            count(c.approvals),
            count(c.applications),
        );
        let p = stats::fisher_exact(ag, ng - ag, acc, ncc - acc);
        r.fisher_p = Some(p);
        r.significant = Some(p < ALPHA);
        if p < ALPHA && ng <= SMALL_GROUP && ag * ncc < acc * ng {
            r.approvals_to_remove_significance = (1..=ng - ag)
                .find(|&k| stats::fisher_exact(ag + k, ng - ag - k, acc, ncc - acc) >= ALPHA);
        }
    } else {
        r.significant = r.z_p.map(|p| p < ALPHA);
    }
    r.score_smd = stats::standardized_mean_difference(&s.score, &c.score);
    r.probability_smd = stats::standardized_mean_difference(&s.probability, &c.probability);
    r
}
