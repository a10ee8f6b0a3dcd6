//! The report as one self-contained HTML page: tables and inline SVG charts, no scripts, readable
//! on screen and printed. Made by the server from the same [`Report`] as the JSON.

use super::report::{DimensionResult, Report};
use std::fmt::Write;

fn esc(s: &str) -> String {
    s.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
        .replace('"', "&quot;")
}

fn pct(v: Option<f64>) -> String {
    v.map_or("&ndash;".into(), |x| format!("{:.1}%", 100.0 * x))
}

fn num(v: Option<f64>, places: usize) -> String {
    v.map_or("&ndash;".into(), |x| format!("{x:.places$}"))
}

/// A p-value: four places, or "&lt; 0.0001".
fn p_value(v: Option<f64>) -> String {
    match v {
        Some(p) if p < 1e-4 => "&lt; 0.0001".into(),
        other => num(other, 4),
    }
}

pub const STYLE: &str = "body{font-family:system-ui,sans-serif;margin:2rem;color:#111;max-width:64rem}
h1{font-size:1.4rem}h2{font-size:1.15rem;margin-top:2rem;border-top:1px solid #999;padding-top:1rem}
table{border-collapse:collapse;margin:.5rem 0}th,td{border:1px solid #bbb;padding:.25rem .5rem;text-align:right}
th:first-child,td:first-child{text-align:left}.caution{border:2px solid #333;padding:.75rem;background:#f4f4f4}
.flag{font-weight:bold}.note{font-style:italic}svg text{font-size:11px;font-family:sans-serif}
@media print{body{margin:0}h2{break-before:auto}svg{max-width:100%}}";

/// Approval rate per group as bars, with the four-fifths line of the control group's rate.
fn rate_chart(d: &DimensionResult) -> String {
    let (w, h, left, bottom) = (640.0, 240.0, 48.0, 40.0);
    let n = d.groups.len().max(1) as f64;
    let slot = (w - left - 10.0) / n;
    let y = |rate: f64| h - bottom - rate * (h - bottom - 10.0);
    let mut s = format!("<svg role=\"img\" aria-label=\"Approval rate by group\" width=\"{w}\" height=\"{h}\" viewBox=\"0 0 {w} {h}\">");
    for t in [0.0, 0.25, 0.5, 0.75, 1.0] {
        let _ = write!(s, "<line x1=\"{left}\" x2=\"{}\" y1=\"{y}\" y2=\"{y}\" stroke=\"#ddd\"/><text x=\"{}\" y=\"{}\" text-anchor=\"end\">{:.0}%</text>", w - 10.0, left - 4.0, y(t) + 4.0, 100.0 * t, y = y(t));
    }
    for (i, g) in d.groups.iter().enumerate() {
        let x = left + slot * i as f64 + slot * 0.15;
        let rate = g.approval_rate.unwrap_or(0.0);
        let flagged = g.four_fifths == "below_four_fifths";
        let fill = if g.four_fifths == "control" {
            "#555"
        } else if flagged {
            "#222"
        } else {
            "#999"
        };
        let _ = write!(s, "<rect x=\"{x:.1}\" y=\"{:.1}\" width=\"{:.1}\" height=\"{:.1}\" fill=\"{fill}\"><title>{}: {}</title></rect>", y(rate), slot * 0.7, (h - bottom) - y(rate), esc(&g.group), pct(g.approval_rate));
        let _ = write!(
            s,
            "<text x=\"{:.1}\" y=\"{}\" text-anchor=\"middle\">{}</text>",
            x + slot * 0.35,
            h - bottom + 14.0,
            esc(&g.group)
        );
        let label = match g.four_fifths {
            "control" => "control",
            "below_four_fifths" => "below 4/5",
            "insufficient_data" => "too few",
            _ => "",
        };
        let _ = write!(
            s,
            "<text x=\"{:.1}\" y=\"{}\" text-anchor=\"middle\">{label}</text>",
            x + slot * 0.35,
            h - bottom + 28.0
        );
    }
    if let Some(control) = d
        .groups
        .iter()
        .find(|g| g.four_fifths == "control")
        .and_then(|g| g.approval_rate)
    {
        let line = y(0.8 * control);
        let _ = write!(s, "<line x1=\"{left}\" x2=\"{}\" y1=\"{line:.1}\" y2=\"{line:.1}\" stroke=\"#000\" stroke-dasharray=\"6 4\"/><text x=\"{}\" y=\"{:.1}\" text-anchor=\"end\">four-fifths of the control rate ({})</text>", w - 10.0, w - 12.0, line - 4.0, pct(Some(0.8 * control)));
    }
    s.push_str("</svg>");
    s
}

/// Approval rate per group against the approve cutoff. Each group's line has its own dash
/// pattern and width (told apart in greyscale print), a legend names them below the axis, and
/// the names at the lines' ends are spread apart so that no two overlap.
fn sweep_chart(d: &DimensionResult) -> String {
    const LABEL_GAP: f64 = 13.0;
    let (w, plot_h, left, bottom, right) = (640.0, 260.0, 48.0, 36.0, 110.0);
    let legend_rows = d.groups.len().div_ceil(3);
    let h = plot_h + 10.0 + 18.0 * legend_rows as f64;
    let cutoffs: Vec<f64> = d.sweep.iter().map(|p| p.cutoff).collect();
    let (lo, hi) = (
        cutoffs.first().copied().unwrap_or(0.0),
        cutoffs.last().copied().unwrap_or(1.0),
    );
    let x = |c: f64| left + (c - lo) / (hi - lo).max(1e-9) * (w - left - right);
    let y = |r: f64| plot_h - bottom - r * (plot_h - bottom - 10.0);
    let dashes = ["", "7 3", "2 3", "9 3 2 3", "1 2", "12 4"];
    let widths = [2.2, 1.6, 1.6, 1.4, 2.0, 1.2];
    let style = |gi: usize| (dashes[gi % dashes.len()], widths[gi % widths.len()]);
    let mut s = format!("<svg role=\"img\" aria-label=\"Approval rate by cutoff, one line per group\" width=\"{w}\" height=\"{h}\" viewBox=\"0 0 {w} {h}\">");
    for t in [0.0, 0.5, 1.0] {
        let _ = write!(s, "<line x1=\"{left}\" x2=\"{}\" y1=\"{yy}\" y2=\"{yy}\" stroke=\"#ddd\"/><text x=\"{}\" y=\"{}\" text-anchor=\"end\">{:.0}%</text>", w - right, left - 4.0, y(t) + 4.0, 100.0 * t, yy = y(t));
    }
    for c in cutoffs.iter().step_by((cutoffs.len() / 6).max(1)) {
        let _ = write!(
            s,
            "<text x=\"{:.1}\" y=\"{}\" text-anchor=\"middle\">{c:.2}</text>",
            x(*c),
            plot_h - bottom + 14.0
        );
    }
    let _ = write!(s, "<text x=\"{:.1}\" y=\"{}\" text-anchor=\"middle\">approve below this probability of default</text>", left + (w - left - right) / 2.0, plot_h - 4.0);
    // Each line, and where it ends (the end label's wanted height).
    let mut ends: Vec<(f64, f64, usize)> = Vec::new();
    for (gi, _) in d.groups.iter().enumerate() {
        let points: Vec<(f64, f64)> = (d.sweep.iter())
            .filter_map(|p| Some((x(p.cutoff), y(p.groups.get(gi)?.approval_rate?))))
            .collect();
        let Some(&(lx, ly)) = points.last() else {
            continue;
        };
        let (dash, width) = style(gi);
        let list: Vec<String> = points
            .iter()
            .map(|(a, b)| format!("{a:.1},{b:.1}"))
            .collect();
        let _ = write!(s, "<polyline points=\"{}\" fill=\"none\" stroke=\"#222\" stroke-width=\"{width}\" stroke-dasharray=\"{dash}\"/>", list.join(" "));
        ends.push((ly, lx, gi));
    }
    // End labels in line order from the top, each at least LABEL_GAP below the one above, then
    // moved up together if the last would leave the plot; a leader joins label and line.
    ends.sort_by(|a, b| a.0.total_cmp(&b.0));
    let mut placed: Vec<f64> = Vec::with_capacity(ends.len());
    for (i, (want, _, _)) in ends.iter().enumerate() {
        let floor = if i == 0 {
            10.0
        } else {
            placed[i - 1] + LABEL_GAP
        };
        placed.push(want.max(floor));
    }
    let limit = plot_h - bottom;
    if let Some(&last) = placed.last() {
        if last > limit {
            let shift = last - limit;
            for p in placed.iter_mut() {
                *p -= shift;
            }
        }
    }
    let label_x = w - right + 14.0;
    for ((ly, lx, gi), at) in ends.iter().zip(&placed) {
        let _ = write!(
            s,
            "<line x1=\"{lx:.1}\" y1=\"{ly:.1}\" x2=\"{:.1}\" y2=\"{at:.1}\" stroke=\"#777\" stroke-width=\"0.6\"/><text x=\"{label_x:.1}\" y=\"{:.1}\">{}</text>",
            label_x - 3.0,
            at + 4.0,
            esc(&d.groups[*gi].group)
        );
    }
    // The legend: each group's line style and name, three to a row.
    for (gi, g) in d.groups.iter().enumerate() {
        let (dash, width) = style(gi);
        let lx = left + 190.0 * (gi % 3) as f64;
        let ly = plot_h + 8.0 + 18.0 * (gi / 3) as f64;
        let _ = write!(s, "<line x1=\"{lx:.1}\" x2=\"{:.1}\" y1=\"{ly:.1}\" y2=\"{ly:.1}\" stroke=\"#222\" stroke-width=\"{width}\" stroke-dasharray=\"{dash}\"/><text x=\"{:.1}\" y=\"{:.1}\">{}</text>", lx + 34.0, lx + 40.0, ly + 4.0, esc(&g.group));
    }
    s.push_str("</svg>");
    s
}

/// The whole page.
pub fn page(r: &Report, title: &str) -> String {
    let mut s = String::new();
    let _ = write!(s, "<!DOCTYPE html><html lang=\"en\"><head><meta charset=\"utf-8\"><title>{}</title><style>{STYLE}</style></head><body>", esc(title));
    let _ = write!(
        s,
        "<h1>{}</h1><p class=\"caution\"><strong>Caution.</strong> {}</p>",
        esc(title),
        esc(r.caution)
    );
    let refer = match r.refer {
        super::Refer::NotApproved => "referrals count as not approved".to_string(),
        super::Refer::Excluded => format!("referrals excluded ({})", r.referrals_excluded),
        super::Refer::Final => format!(
            "referrals count as their underwriters' final actions ({} had none; {} left out)",
            r.referrals_without_final_action.unwrap_or(0),
            r.referrals_excluded
        ),
    };
    let _ = write!(s, "<p>{} decisions; {refer}; groups smaller than {} (effective) applications get no ratio; tests at the {} level.</p>", r.decisions, r.min_group_size, r.significance_level);
    for d in &r.dimensions {
        let _ = write!(
            s,
            "<h2>{}</h2><p>Control group: <strong>{}</strong> ({})</p>",
            esc(&d.name),
            d.control_group
                .as_deref()
                .map(esc)
                .unwrap_or_else(|| "none".into()),
            esc(d.control_rule)
        );
        if let Some(n) = &d.note {
            let _ = write!(s, "<p class=\"note\">{}</p>", esc(n));
        }
        s.push_str("<table><thead><tr><th>group</th><th>applications</th><th>approvals</th><th>approval rate</th><th>adverse impact ratio</th><th>95% interval</th><th>four-fifths</th><th>Fisher p</th><th>z p</th><th>approvals to remove significance</th><th>score SMD</th></tr></thead><tbody>");
        for g in &d.groups {
            let flag = match g.four_fifths {
                "below_four_fifths" => "<span class=\"flag\">below four-fifths</span>",
                "not_below_four_fifths" => "not below",
                "control" => "control",
                "insufficient_data" => "insufficient data",
                "no_applications" => "no applications",
                _ => "no comparison",
            };
            let ci = g.ratio_ci95.map_or("&ndash;".into(), |[lo, hi]| {
                format!("{lo:.3} &ndash; {hi:.3}")
            });
            let _ = write!(s, "<tr><td>{}</td><td>{:.1}</td><td>{:.1}</td><td>{}</td><td>{}</td><td>{ci}</td><td>{flag}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>", esc(&g.group), g.applications, g.approvals, pct(g.approval_rate), num(g.adverse_impact_ratio, 3), p_value(g.fisher_p), p_value(g.z_p), g.approvals_to_remove_significance.map_or("&ndash;".into(), |k| k.to_string()), num(g.score_smd, 3));
        }
        s.push_str("</tbody></table>");
        let _ = write!(
            s,
            "<p>Decisions without group data: {}. Upload rows matching no decision: {}.",
            d.decisions_without_group_data, d.unknown_application_ids
        );
        if !d.groups_without_applications.is_empty() {
            let _ = write!(
                s,
                " Groups with no applications: {}.",
                esc(&d.groups_without_applications.join(", "))
            );
        }
        s.push_str("</p><h3>Approval rate by group</h3>");
        s.push_str(&rate_chart(d));
        s.push_str("<h3>If the approve cutoff were different</h3>");
        s.push_str(&sweep_chart(d));
    }
    s.push_str("<h3>The approved book at each cutoff</h3><table><thead><tr><th>approve below</th><th>approval rate</th><th>expected default rate of the approved</th></tr></thead><tbody>");
    for p in &r.overall_sweep {
        let _ = write!(
            s,
            "<tr><td>{:.2}</td><td>{}</td><td>{}</td></tr>",
            p.cutoff,
            pct(p.approval_rate),
            pct(p.expected_default_rate_of_approved)
        );
    }
    let _ = writeln!(
        s,
        "</tbody></table><p class=\"note\">{}</p></body></html>",
        esc(r.sweep_rule)
    );
    s
}
