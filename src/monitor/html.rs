//! The stability report as a printable, script-free HTML page with SVG charts: the score's
//! distribution now against development, and the PSI of every field against the bands.

use super::stability::{FieldStability, Stability};
use super::trends::ReasonTrends;
use std::fmt::Write;

/// Text for an HTML page (every monitoring page escapes through this).
pub(super) fn esc(s: &str) -> String {
    s.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
        .replace('"', "&quot;")
}

/// The monitoring pages' one style block.
pub(super) const STYLE: &str = "body{font-family:system-ui,sans-serif;margin:2rem;color:#111;max-width:64rem}
h1{font-size:1.4rem}h2{font-size:1.15rem;margin-top:2rem;border-top:1px solid #999;padding-top:1rem}
table{border-collapse:collapse;margin:.5rem 0}th,td{border:1px solid #bbb;padding:.25rem .5rem;text-align:right}
th:first-child,td:first-child{text-align:left}.caution{border:2px solid #333;padding:.75rem;background:#f4f4f4}
svg text{font-size:11px;font-family:sans-serif}section{break-inside:avoid}@media print{body{margin:0}svg{max-width:100%}h2{break-after:avoid}}";

/// A report's decision range in words.
pub(super) fn range_words(from: &Option<String>, to: &Option<String>) -> String {
    match (from, to) {
        (Some(f), Some(t)) => format!("decided from {f} to before {t}"),
        (Some(f), None) => format!("decided from {f}"),
        (None, Some(t)) => format!("decided before {t}"),
        (None, None) => "every recorded decision".to_string(),
    }
}

/// Development and current shares per bin, side by side (development hatched).
fn distribution_chart(d: &FieldStability) -> String {
    // Bin labels run at -30 degrees from their bin's middle: the margins below and to the left
    // grow with the longest one (about 6.2 px a character at 11 px), so none leaves the chart.
    let longest = (d.bins.iter())
        .map(|b| b.label.chars().count())
        .max()
        .unwrap_or(0) as f64;
    let n = d.bins.len().max(1) as f64;
    let w = 640.0;
    let reach = longest * 6.2 * 0.866;
    let left = f64::max(44.0, reach - (w - 54.0) / n / 2.0 + 6.0);
    let bottom = 30.0 + longest * 6.2 * 0.5;
    let h = 172.0 + bottom;
    let slot = (w - left - 10.0) / n;
    let most = (d.bins.iter())
        .map(|b| b.development.max(b.now))
        .fold(0.0f64, f64::max)
        .max(1e-9);
    let y = |v: f64| h - bottom - v / most * (h - bottom - 20.0);
    let mut s = format!("<svg role=\"img\" aria-label=\"{} now against development\" width=\"{w}\" height=\"{h}\" viewBox=\"0 0 {w} {h}\"><defs><pattern id=\"dev\" width=\"5\" height=\"5\" patternUnits=\"userSpaceOnUse\" patternTransform=\"rotate(45)\"><rect width=\"5\" height=\"5\" fill=\"#fff\"/><line x1=\"0\" y1=\"0\" x2=\"0\" y2=\"5\" stroke=\"#555\" stroke-width=\"2\"/></pattern></defs>", esc(&d.name));
    for (i, b) in d.bins.iter().enumerate() {
        let x = left + slot * i as f64;
        let bw = slot * 0.38;
        let _ = write!(s, "<rect x=\"{:.1}\" y=\"{:.1}\" width=\"{bw:.1}\" height=\"{:.1}\" fill=\"url(#dev)\" stroke=\"#555\"><title>{} development {:.1}%</title></rect>", x + slot * 0.1, y(b.development), h - bottom - y(b.development), esc(&b.label), 100.0 * b.development);
        let _ = write!(s, "<rect x=\"{:.1}\" y=\"{:.1}\" width=\"{bw:.1}\" height=\"{:.1}\" fill=\"#222\"><title>{} now {:.1}%</title></rect>", x + slot * 0.1 + bw, y(b.now), h - bottom - y(b.now), esc(&b.label), 100.0 * b.now);
        let _ = write!(s, "<text x=\"{:.1}\" y=\"{}\" text-anchor=\"end\" transform=\"rotate(-30 {:.1} {})\">{}</text>", x + slot * 0.5, h - bottom + 14.0, x + slot * 0.5, h - bottom + 14.0, esc(&b.label));
    }
    let _ = write!(s, "<rect x=\"{left}\" y=\"4\" width=\"12\" height=\"10\" fill=\"url(#dev)\" stroke=\"#555\"/><text x=\"{}\" y=\"13\">development</text><rect x=\"{}\" y=\"4\" width=\"12\" height=\"10\" fill=\"#222\"/><text x=\"{}\" y=\"13\">now</text>", left + 16.0, left + 110.0, left + 126.0);
    s.push_str("</svg>");
    s
}

/// PSI per distribution as bars, with the 0.10 and 0.25 band lines.
fn psi_chart(r: &Stability) -> String {
    let rows = r.distributions.len() as f64;
    let (w, left, row) = (640.0, 190.0, 20.0);
    let h = 30.0 + row * rows;
    let most = (r.distributions.iter())
        .map(|d| d.psi)
        .fold(0.3f64, f64::max);
    let x = |v: f64| left + v / most * (w - left - 60.0);
    let mut s = format!("<svg role=\"img\" aria-label=\"Population stability index per field\" width=\"{w}\" height=\"{h}\" viewBox=\"0 0 {w} {h}\">");
    for (i, d) in r.distributions.iter().enumerate() {
        let y = 8.0 + row * i as f64;
        let _ = write!(s, "<text x=\"{}\" y=\"{:.1}\" text-anchor=\"end\">{}</text><rect x=\"{left}\" y=\"{:.1}\" width=\"{:.1}\" height=\"{}\" fill=\"#333\"/><text x=\"{:.1}\" y=\"{:.1}\">{:.3} {}</text>", left - 6.0, y + 12.0, esc(&d.name), y + 2.0, (x(d.psi) - left).max(1.0), row - 6.0, x(d.psi) + 4.0, y + 12.0, d.psi, d.band);
    }
    for (v, label) in [(0.10, "0.10 watch"), (0.25, "0.25 act")] {
        let _ = write!(s, "<line x1=\"{:.1}\" x2=\"{:.1}\" y1=\"4\" y2=\"{:.1}\" stroke=\"#000\" stroke-dasharray=\"5 3\"/><text x=\"{:.1}\" y=\"{:.1}\" text-anchor=\"middle\">{label}</text>", x(v), x(v), h - 16.0, x(v), h - 4.0);
    }
    s.push_str("</svg>");
    s
}

/// The whole page.
pub fn page(r: &Stability) -> String {
    let mut s = String::new();
    let title = format!(
        "Population stability: {} version {}",
        r.model_id, r.model_version
    );
    let _ = write!(s, "<!DOCTYPE html><html lang=\"en\"><head><meta charset=\"utf-8\"><title>{}</title><style>{STYLE}</style></head><body><h1>{}</h1>", esc(&title), esc(&title));
    let _ = write!(
        s,
        "<p class=\"caution\"><strong>Caution.</strong> {}</p>",
        esc(r.caution)
    );
    let range = range_words(&r.from, &r.to);
    let _ = write!(s, "<p>{} decisions ({}), against the development sample: {} ({} rows). Records whose request could not be read: {}.</p>", r.decisions, esc(&range), esc(&r.development), r.development_rows, r.unreadable);
    s.push_str("<h2>Stability index per distribution</h2>");
    s.push_str(&psi_chart(r));
    s.push_str("<table><thead><tr><th>distribution</th><th>PSI</th><th>band</th><th>missing, development</th><th>missing, now</th></tr></thead><tbody>");
    for d in &r.distributions {
        let _ = write!(
            s,
            "<tr><td>{}</td><td>{:.4}</td><td>{}</td><td>{:.1}%</td><td>{:.1}%</td></tr>",
            esc(&d.name),
            d.psi,
            d.band,
            100.0 * d.missing_development,
            100.0 * d.missing_now
        );
    }
    s.push_str("</tbody></table><p>Bands (common practice): below 0.10 stable, 0.10 to 0.25 watch, above 0.25 act.</p>");
    for d in &r.distributions {
        let _ = write!(
            s,
            "<section><h2>{}: {:.4} ({})</h2>",
            esc(&d.name),
            d.psi,
            d.band
        );
        s.push_str(&distribution_chart(d));
        s.push_str("</section>");
    }
    s.push_str("</body></html>\n");
    s
}

/// Reason trends: one small chart per reason code, its share of declines and referrals per
/// period as bars (one row of charts per model version), then the table.
pub fn trends_page(r: &ReasonTrends) -> String {
    let mut s = String::new();
    let title = format!("Reason trends: {} by {}", r.model_id, r.period.name());
    let _ = write!(s, "<!DOCTYPE html><html lang=\"en\"><head><meta charset=\"utf-8\"><title>{}</title><style>{STYLE}</style></head><body><h1>{}</h1>", esc(&title), esc(&title));
    s.push_str("<p class=\"caution\"><strong>Caution.</strong> How often each code was a principal reason among the declines and referrals of each period. A shift can come from applicants, from policy or from the model; read it with the stability report and the lender's own changes.</p>");
    let mut versions: Vec<&str> = r.periods.iter().map(|p| p.model_version.as_str()).collect();
    versions.dedup();
    for version in versions {
        let periods: Vec<_> = r
            .periods
            .iter()
            .filter(|p| p.model_version == version)
            .collect();
        let mut codes: Vec<&str> = periods
            .iter()
            .flat_map(|p| p.reasons.iter().map(|x| x.code.as_str()))
            .collect();
        codes.sort_unstable();
        codes.dedup();
        let _ = write!(s, "<h2>Version {}</h2>", esc(version));
        let (w, h, left, bottom) = (300.0, 120.0, 34.0, 30.0);
        let slot = (w - left - 6.0) / periods.len().max(1) as f64;
        for code in codes {
            let _ = write!(s, "<svg role=\"img\" aria-label=\"{} share by period\" width=\"{w}\" height=\"{h}\" viewBox=\"0 0 {w} {h}\"><text x=\"{left}\" y=\"12\">{}</text>", esc(code), esc(code));
            let y = |v: f64| h - bottom - v * (h - bottom - 18.0);
            let _ = write!(s, "<line x1=\"{left}\" x2=\"{w}\" y1=\"{:.1}\" y2=\"{:.1}\" stroke=\"#999\"/><text x=\"{}\" y=\"{:.1}\" text-anchor=\"end\">0%</text><text x=\"{}\" y=\"{:.1}\" text-anchor=\"end\">100%</text>", y(0.0), y(0.0), left - 3.0, y(0.0) + 4.0, left - 3.0, y(1.0) + 4.0);
            for (i, p) in periods.iter().enumerate() {
                let share = (p.reasons.iter())
                    .find(|x| x.code == code)
                    .map_or(0.0, |x| x.share);
                let x = left + slot * i as f64;
                let _ = write!(s, "<rect x=\"{:.1}\" y=\"{:.1}\" width=\"{:.1}\" height=\"{:.1}\" fill=\"#333\"><title>{} {}: {:.1}%</title></rect>", x + slot * 0.15, y(share), slot * 0.7, y(0.0) - y(share), esc(code), esc(&p.period), 100.0 * share);
                if periods.len() <= 8 || i % (periods.len() / 6).max(1) == 0 {
                    let _ = write!(
                        s,
                        "<text x=\"{:.1}\" y=\"{}\" text-anchor=\"middle\">{}</text>",
                        x + slot * 0.5,
                        h - bottom + 13.0,
                        esc(&p.period)
                    );
                }
            }
            s.push_str("</svg>");
        }
    }
    s.push_str("<h2>Every period</h2><table><thead><tr><th>period</th><th>version</th><th>declines</th><th>referrals</th><th>code</th><th>count</th><th>share</th><th>change</th></tr></thead><tbody>");
    for p in &r.periods {
        for x in &p.reasons {
            let change = x
                .change
                .map_or(String::new(), |c| format!("{:+.1} pt", 100.0 * c));
            let _ = write!(s, "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{:.1}%</td><td>{change}</td></tr>", esc(&p.period), esc(&p.model_version), p.declines, p.referrals, esc(&x.code), x.count, 100.0 * x.share);
        }
    }
    s.push_str("</tbody></table></body></html>\n");
    s
}
