//! The back-test as a printable, script-free page: the ROC curve, the KS gap, calibration by
//! score band, by decile and by months since decision (observed rate with its Jeffreys
//! interval against the expected rate), and the default rate by decision outcome.

use super::backtest::BackTest;
use super::calibration::BandCheck;
use super::html::{esc, range_words, STYLE};
use crate::evaluate::curves::{largest_gap, CurvePoint};
use crate::evaluate::html::unit_plot;
use std::fmt::Write;

fn pct(v: f64) -> String {
    format!("{:.2}%", 100.0 * v)
}

/// Per band: the observed rate as a dot with its interval as a bar, the expected rate as an
/// open diamond; bands not rated are drawn grey.
fn band_chart(label: &str, bands: &[BandCheck]) -> String {
    let (w, h, left, bottom, top) = (640.0, 240.0, 52.0, 58.0, 14.0);
    let slot = (w - left - 10.0) / bands.len().max(1) as f64;
    // The scale fits the rated bands' intervals; a small band's wide interval runs off the top
    // (drawn to the edge, without its cap) rather than flattening every other band.
    let most = (bands.iter())
        .map(|b| {
            let rated = b.interval.filter(|_| b.rating != "not_rated");
            (rated.map_or(0.0, |[_, hi]| hi))
                .max(b.expected_rate)
                .max(b.observed_rate)
        })
        .fold(0.01f64, f64::max)
        .min(1.0)
        * 1.1;
    let y = |v: f64| h - bottom - v.min(most) / most * (h - bottom - top);
    let mut s = format!(
        "<svg role=\"img\" aria-label=\"{}\" width=\"{w}\" height=\"{h}\" viewBox=\"0 0 {w} {h}\">",
        esc(label)
    );
    for t in [0.0, 0.5, 1.0] {
        let _ = write!(s, "<line x1=\"{left}\" x2=\"{}\" y1=\"{:.1}\" y2=\"{:.1}\" stroke=\"#ddd\"/><text x=\"{}\" y=\"{:.1}\" text-anchor=\"end\">{}</text>", w - 10.0, y(t * most), y(t * most), left - 4.0, y(t * most) + 4.0, pct(t * most));
    }
    for (i, b) in bands.iter().enumerate() {
        let cx = left + slot * (i as f64 + 0.5);
        let ink = if b.rating == "not_rated" {
            "#999"
        } else {
            "#111"
        };
        if let Some([lo, hi]) = b.interval {
            let _ = write!(s, "<line x1=\"{cx:.1}\" x2=\"{cx:.1}\" y1=\"{:.1}\" y2=\"{:.1}\" stroke=\"{ink}\" stroke-width=\"2\"/><line x1=\"{:.1}\" x2=\"{:.1}\" y1=\"{:.1}\" y2=\"{:.1}\" stroke=\"{ink}\"/>", y(lo), y(hi), cx - 4.0, cx + 4.0, y(lo), y(lo));
            if hi <= most {
                let _ = write!(
                    s,
                    "<line x1=\"{:.1}\" x2=\"{:.1}\" y1=\"{:.1}\" y2=\"{:.1}\" stroke=\"{ink}\"/>",
                    cx - 4.0,
                    cx + 4.0,
                    y(hi),
                    y(hi)
                );
            }
        }
        let _ = write!(s, "<circle cx=\"{cx:.1}\" cy=\"{:.1}\" r=\"3.5\" fill=\"{ink}\"><title>{}: observed {} of {} ({})</title></circle>", y(b.observed_rate), esc(&b.label), b.defaults, b.decisions, pct(b.observed_rate));
        let ey = y(b.expected_rate);
        let _ = write!(s, "<path d=\"M{:.1} {ey:.1} L{cx:.1} {:.1} L{:.1} {ey:.1} L{cx:.1} {:.1} Z\" fill=\"#fff\" stroke=\"{ink}\" stroke-width=\"1.5\"><title>{}: expected {}</title></path>", cx - 6.0, ey - 6.0, cx + 6.0, ey + 6.0, esc(&b.label), pct(b.expected_rate));
        let _ = write!(s, "<text x=\"{cx:.1}\" y=\"{}\" text-anchor=\"end\" transform=\"rotate(-30 {cx:.1} {})\">{}</text>", h - bottom + 14.0, h - bottom + 14.0, esc(&b.label));
    }
    let _ = write!(s, "<circle cx=\"{}\" cy=\"8\" r=\"3.5\" fill=\"#111\"/><text x=\"{}\" y=\"12\">observed, with its 95% Jeffreys interval</text><path d=\"M{} 8 L{} 2 L{} 8 L{} 14 Z\" fill=\"#fff\" stroke=\"#111\"/><text x=\"{}\" y=\"12\">expected (mean predicted)</text>", left + 4.0, left + 12.0, left + 250.0, left + 256.0, left + 262.0, left + 256.0, left + 268.0);
    s.push_str("</svg>");
    s
}

fn band_table(bands: &[BandCheck]) -> String {
    let mut s = String::from("<table><thead><tr><th>band</th><th>decisions</th><th>defaults</th><th>expected</th><th>observed</th><th>95% interval</th><th>binomial p</th><th>rating</th></tr></thead><tbody>");
    for b in bands {
        let interval = b.interval.map_or(String::new(), |[lo, hi]| {
            format!("{} to {}", pct(lo), pct(hi))
        });
        let p = b.binomial_p.map_or(String::new(), |p| format!("{p:.4}"));
        let _ = write!(s, "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{interval}</td><td>{p}</td><td>{}</td></tr>", esc(&b.label), b.decisions, b.defaults, pct(b.expected_rate), pct(b.observed_rate), b.rating.replace('_', " "));
    }
    s.push_str("</tbody></table>");
    s
}

/// The whole page; `roc` is the thinned curve of [`super::BackTestTally::finish`].
pub fn page(r: &BackTest, roc: &[CurvePoint]) -> String {
    let mut s = String::new();
    let title = format!("Back-test: {} version {}", r.model_id, r.model_version);
    let _ = write!(s, "<!DOCTYPE html><html lang=\"en\"><head><meta charset=\"utf-8\"><title>{}</title><style>{STYLE}</style></head><body><h1>{}</h1>", esc(&title), esc(&title));
    let _ = write!(
        s,
        "<p class=\"caution\"><strong>Caution.</strong> {}</p>",
        esc(r.caution)
    );
    let range = range_words(&r.from, &r.to);
    let _ = write!(s, "<p>{} decisions ({}); {} with an observed outcome, {} of them defaulted. Outcomes observed before their decision, left out: {}.</p>", r.decisions, esc(&range), r.with_outcome, r.defaults, r.observed_before_decision);
    s.push_str("<table><tbody>");
    match &r.discrimination {
        Some(d) => {
            let _ = write!(s, "<tr><td>AUC</td><td>{:.4}</td></tr><tr><td>Gini</td><td>{:.4}</td></tr><tr><td>KS</td><td>{:.4} (at probability {:.4})</td></tr>", d.auc, d.gini, d.ks, d.ks_threshold);
        }
        None => {
            let _ = write!(s, "<tr><td>AUC, Gini, KS</td><td>not rated: fewer than {} defaulters or non-defaulters</td></tr>", r.rules.min_defaults);
        }
    }
    if let Some(b) = r.brier {
        let _ = write!(s, "<tr><td>Brier score</td><td>{b:.4}</td></tr>");
    }
    s.push_str("</tbody></table>");
    if let Some(d) = &r.discrimination {
        let curve: Vec<(f64, f64)> = roc
            .iter()
            .map(|p| (p.goods_flagged, p.defaults_caught))
            .collect();
        let _ = write!(s, "<section><h2>ROC curve (area {:.4})</h2>", d.auc);
        s.push_str(&unit_plot(
            "ROC curve",
            (
                "share of non-defaulters flagged",
                "share of defaulters caught",
            ),
            &|t| format!("{t}"),
            &[(curve, "", 2.0)],
            "",
        ));
        s.push_str("</section>");
        let rate = r.defaults as f64 / r.with_outcome.max(1) as f64;
        let flagged = |p: &CurvePoint| rate * p.defaults_caught + (1.0 - rate) * p.goods_flagged;
        let bads: Vec<(f64, f64)> = roc
            .iter()
            .map(|p| (flagged(p), p.defaults_caught))
            .collect();
        let goods: Vec<(f64, f64)> = roc.iter().map(|p| (flagged(p), p.goods_flagged)).collect();
        let mut marks = String::new();
        if let Some(g) = largest_gap(roc) {
            let (size, pad) = (320.0, 40.0);
            let px = pad + flagged(&g) * (size - 2.0 * pad);
            let py = |v: f64| size - pad - v * (size - 2.0 * pad);
            let _ = write!(marks, "<line x1=\"{px:.1}\" x2=\"{px:.1}\" y1=\"{:.1}\" y2=\"{:.1}\" stroke=\"#000\" stroke-width=\"3\"/><text x=\"{:.1}\" y=\"{:.1}\">KS {:.3}</text>", py(g.defaults_caught), py(g.goods_flagged), px + 5.0, (py(g.defaults_caught) + py(g.goods_flagged)) / 2.0, d.ks);
        }
        let _ = write!(s, "<section><h2>KS: the largest gap ({:.4})</h2><p>Solid: defaulters caught; dashed: non-defaulters flagged; both against the share of decisions flagged, highest probability first.</p>", d.ks);
        s.push_str(&unit_plot(
            "KS curves",
            ("share of decisions flagged", "cumulative share"),
            &|t| format!("{t}"),
            &[(bads, "", 2.0), (goods, "6 3", 1.6)],
            &marks,
        ));
        s.push_str("</section>");
    }
    let rules = format!("<p>Each band: one-sided binomial test of more defaults than its mean predicted probability allows (level {}), and the Jeffreys interval. A band with fewer than {} defaults observed and expected is not rated (common practice).</p>", r.rules.alpha, r.rules.min_defaults);
    for (heading, about, bands) in [
        (
            "Calibration by score band",
            r.rules.score_bands.as_str(),
            &r.by_score_band,
        ),
        (
            "Calibration by probability decile",
            r.rules.deciles.as_str(),
            &r.by_decile,
        ),
        (
            "By months from decision to observation",
            "the vintage view: how the default rate grows with time on book",
            &r.by_months_since_decision,
        ),
    ] {
        if bands.is_empty() {
            continue;
        }
        let _ = write!(
            s,
            "<section><h2>{heading}</h2><p>Bands: {}.</p>{rules}",
            esc(about)
        );
        s.push_str(&band_chart(heading, bands));
        s.push_str("</section>");
        s.push_str(&band_table(bands));
    }
    s.push_str("<h2>Default rate by decision outcome</h2><table><thead><tr><th>outcome</th><th>decisions</th><th>with outcome</th><th>defaults</th><th>expected</th><th>observed</th></tr></thead><tbody>");
    for o in &r.by_outcome {
        let _ = write!(
            s,
            "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
            esc(&o.outcome),
            o.decisions,
            o.with_outcome,
            o.defaults,
            o.expected_rate.map_or(String::new(), pct),
            o.observed_rate.map_or(String::new(), pct)
        );
    }
    let _ = writeln!(
        s,
        "</tbody></table><p>Matching: {}.</p></body></html>",
        esc(&r.rules.matching)
    );
    s
}
