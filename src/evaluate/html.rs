//! `plumbline evaluate --html`: the validation pictures of a model on labelled data as a
//! printable, script-free page: the ROC curve with its area, the KS gap, calibration by
//! probability decile against the diagonal, and the population stability of each field.

use super::curves::{largest_gap, thinned, CurvePoint};
use super::stability::Shift;
use super::Report;
use std::fmt::Write;

fn esc(s: &str) -> String {
    s.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
        .replace('"', "&quot;")
}

const STYLE: &str = "body{font-family:system-ui,sans-serif;margin:2rem;color:#111;max-width:64rem}
h1{font-size:1.4rem}h2{font-size:1.15rem;margin-top:2rem;border-top:1px solid #999;padding-top:1rem}
table{border-collapse:collapse;margin:.5rem 0}th,td{border:1px solid #bbb;padding:.25rem .5rem;text-align:right}
th:first-child,td:first-child{text-align:left}.caution{border:2px solid #333;padding:.75rem;background:#f4f4f4}
svg text{font-size:11px;font-family:sans-serif}@media print{body{margin:0}svg{max-width:100%}}";

/// A square plot of [0, 1] x [0, 1] with axes, a diagonal, and `lines` (points, dash, width).
/// A line to draw: its points in [0, 1] x [0, 1], dash pattern and stroke width.
pub type Line<'a> = (Vec<(f64, f64)>, &'a str, f64);

/// `tick` writes an axis value (both axes run over the same range).
pub fn unit_plot(
    label: &str,
    (x_axis, y_axis): (&str, &str),
    tick: &dyn Fn(f64) -> String,
    lines: &[Line<'_>],
    marks: &str,
) -> String {
    let (size, pad) = (320.0, 40.0);
    let at = |x: f64, y: f64| {
        (
            pad + x * (size - 2.0 * pad),
            size - pad - y * (size - 2.0 * pad),
        )
    };
    let mut s = format!("<svg role=\"img\" aria-label=\"{}\" width=\"{size}\" height=\"{size}\" viewBox=\"0 0 {size} {size}\">", esc(label));
    let (x0, y0) = at(0.0, 0.0);
    let (x1, y1) = at(1.0, 1.0);
    let _ = write!(s, "<rect x=\"{x0}\" y=\"{y1}\" width=\"{}\" height=\"{}\" fill=\"none\" stroke=\"#999\"/><line x1=\"{x0}\" y1=\"{y0}\" x2=\"{x1}\" y2=\"{y1}\" stroke=\"#bbb\" stroke-dasharray=\"3 3\"/>", x1 - x0, y0 - y1);
    for t in [0.0, 0.5, 1.0] {
        let (x, _) = at(t, 0.0);
        let (_, y) = at(0.0, t);
        let _ = write!(s, "<text x=\"{x}\" y=\"{}\" text-anchor=\"middle\">{}</text><text x=\"{}\" y=\"{}\" text-anchor=\"end\">{}</text>", y0 + 14.0, tick(t), x0 - 4.0, y + 4.0, tick(t));
    }
    let _ = write!(s, "<text x=\"{}\" y=\"{}\" text-anchor=\"middle\">{}</text><text x=\"12\" y=\"{}\" text-anchor=\"middle\" transform=\"rotate(-90 12 {})\">{}</text>", (x0 + x1) / 2.0, size - 6.0, esc(x_axis), (y0 + y1) / 2.0, (y0 + y1) / 2.0, esc(y_axis));
    for (points, dash, width) in lines {
        let list: Vec<String> = (points.iter())
            .map(|&(x, y)| {
                let (a, b) = at(x, y);
                format!("{a:.1},{b:.1}")
            })
            .collect();
        let _ = write!(s, "<polyline points=\"{}\" fill=\"none\" stroke=\"#111\" stroke-width=\"{width}\" stroke-dasharray=\"{dash}\"/>", list.join(" "));
    }
    s.push_str(marks);
    s.push_str("</svg>");
    s
}

/// The whole page.
pub fn page(title: &str, r: &Report, roc: &[CurvePoint], shifts: &[Shift]) -> String {
    let mut s = String::new();
    let _ = write!(s, "<!DOCTYPE html><html lang=\"en\"><head><meta charset=\"utf-8\"><title>{}</title><style>{STYLE}</style></head><body><h1>{}</h1>", esc(title), esc(title));
    s.push_str("<p class=\"caution\"><strong>Caution.</strong> Validation figures on one labelled sample. They support, and do not replace, the lender's model-risk review; a hold-out sample or later outcomes say more than the development data.</p>");
    let _ = write!(s, "<table><tbody><tr><td>rows</td><td>{}</td></tr><tr><td>default rate</td><td>{:.2}%</td></tr><tr><td>AUC</td><td>{:.4}</td></tr><tr><td>Gini</td><td>{:.4}</td></tr><tr><td>KS</td><td>{:.4}</td></tr><tr><td>Brier score</td><td>{:.4}</td></tr><tr><td>log loss</td><td>{:.4}</td></tr></tbody></table>", r.rows, 100.0 * r.base_rate, r.auc, r.gini, r.ks, r.brier, r.log_loss);
    let curve: Vec<(f64, f64)> = thinned(roc, 400)
        .iter()
        .map(|p| (p.goods_flagged, p.defaults_caught))
        .collect();
    let _ = write!(s, "<h2>ROC curve (area {:.4})</h2>", r.auc);
    s.push_str(&unit_plot(
        "ROC curve",
        (
            "share of non-defaulters flagged",
            "share of defaulters caught",
        ),
        &|t| format!("{t}"),
        &[(curve.clone(), "", 2.0)],
        "",
    ));
    // KS: both cumulative shares against the share of applicants flagged, and the largest gap.
    let thin = thinned(roc, 400);
    // The share of all applicants at or above the threshold.
    let flagged =
        |p: &CurvePoint| r.base_rate * p.defaults_caught + (1.0 - r.base_rate) * p.goods_flagged;
    let bads: Vec<(f64, f64)> = thin
        .iter()
        .map(|p| (flagged(p), p.defaults_caught))
        .collect();
    let goods: Vec<(f64, f64)> = thin.iter().map(|p| (flagged(p), p.goods_flagged)).collect();
    let mut marks = String::new();
    if let Some(g) = largest_gap(roc) {
        let x = flagged(&g);
        let (size, pad) = (320.0, 40.0);
        let px = pad + x * (size - 2.0 * pad);
        let py = |v: f64| size - pad - v * (size - 2.0 * pad);
        let _ = write!(marks, "<line x1=\"{px:.1}\" x2=\"{px:.1}\" y1=\"{:.1}\" y2=\"{:.1}\" stroke=\"#000\" stroke-width=\"3\"/><text x=\"{:.1}\" y=\"{:.1}\">KS {:.3}</text>", py(g.defaults_caught), py(g.goods_flagged), px + 5.0, (py(g.defaults_caught) + py(g.goods_flagged)) / 2.0, (g.defaults_caught - g.goods_flagged).abs());
    }
    let _ = write!(s, "<h2>KS: the largest gap ({:.4})</h2><p>Solid: defaulters caught; dashed: non-defaulters flagged; both against the share of applicants flagged, highest probability first.</p>", r.ks);
    s.push_str(&unit_plot(
        "KS curves",
        ("share of applicants flagged", "cumulative share"),
        &|t| format!("{t}"),
        &[(bads, "", 2.0), (goods, "6 3", 1.6)],
        &marks,
    ));
    // Calibration: each decile's mean prediction against its observed default rate.
    let most = (r.calibration.iter())
        .map(|b| b.mean_predicted.max(b.observed_rate))
        .fold(0.05f64, f64::max)
        .min(1.0);
    let points: Vec<(f64, f64)> = (r.calibration.iter())
        .map(|b| (b.mean_predicted / most, b.observed_rate / most))
        .collect();
    let mut dots = String::new();
    for &(x, y) in &points {
        let (size, pad) = (320.0, 40.0);
        let _ = write!(
            dots,
            "<circle cx=\"{:.1}\" cy=\"{:.1}\" r=\"4\" fill=\"#111\"/>",
            pad + x * (size - 2.0 * pad),
            size - pad - y * (size - 2.0 * pad)
        );
    }
    let _ = write!(s, "<h2>Calibration by probability decile</h2><p>Mean predicted probability against the observed default rate per decile; the dashed diagonal is perfect calibration.</p>");
    s.push_str(&unit_plot(
        "Calibration by decile",
        ("mean predicted probability", "observed default rate"),
        &|t| format!("{:.0}%", 100.0 * t * most),
        &[(points, "", 1.2)],
        &dots,
    ));
    s.push_str("<table><thead><tr><th>decile</th><th>rows</th><th>mean predicted</th><th>observed</th></tr></thead><tbody>");
    for (i, b) in r.calibration.iter().enumerate() {
        let _ = write!(
            s,
            "<tr><td>{}</td><td>{}</td><td>{:.2}%</td><td>{:.2}%</td></tr>",
            i + 1,
            b.rows,
            100.0 * b.mean_predicted,
            100.0 * b.observed_rate
        );
    }
    s.push_str("</tbody></table>");
    if !shifts.is_empty() {
        s.push_str("<h2>Population stability against the development sample</h2><table><thead><tr><th>distribution</th><th>PSI</th><th>reading</th></tr></thead><tbody>");
        for sh in shifts {
            let _ = write!(
                s,
                "<tr><td>{}</td><td>{:.4}</td><td>{}</td></tr>",
                esc(&sh.name),
                sh.psi,
                sh.reading
            );
        }
        s.push_str("</tbody></table><p>Bands (common practice): below 0.10 stable, 0.10 to 0.25 moderate, above 0.25 major.</p>");
    }
    s.push_str("</body></html>\n");
    s
}
