//! Reason trends: how often each reason code was a principal reason among the declines and
//! referrals of each period (ISO week or calendar month, UTC) and model version, with the change
//! in share against the version's previous period. Counted as the records stream past: memory
//! holds one count per period, version and code.

use crate::records::export::csv_cell;
use crate::records::{Outcome, Record};
use serde::Serialize;
use std::collections::BTreeMap;
use std::fmt::Write;

/// How decisions are grouped in time.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, utoipa::ToSchema, clap::ValueEnum)]
#[serde(rename_all = "snake_case")]
pub enum Period {
    /// ISO 8601 weeks (Monday to Sunday), written `2026-W49`.
    Week,
    /// Calendar months, written `2026-12`.
    Month,
}

impl Period {
    pub fn name(self) -> &'static str {
        match self {
            Period::Week => "week",
            Period::Month => "month",
        }
    }

    pub fn from_name(s: &str) -> Option<Period> {
        match s {
            "week" => Some(Period::Week),
            "month" => Some(Period::Month),
            _ => None,
        }
    }

    /// The period a recorded time (`YYYY-MM-DDTHH:MM:SS...Z`) falls in.
    fn of(self, decided_at: &str) -> Option<String> {
        let (y, m, d) = (
            decided_at.get(0..4)?.parse::<i32>().ok()?,
            decided_at.get(5..7)?.parse::<u8>().ok()?,
            decided_at.get(8..10)?.parse::<u8>().ok()?,
        );
        match self {
            Period::Month => Some(format!("{y:04}-{m:02}")),
            Period::Week => {
                let month = time::Month::try_from(m).ok()?;
                let date = time::Date::from_calendar_date(y, month, d).ok()?;
                let (year, week, _) = date.to_iso_week_date();
                Some(format!("{year:04}-W{week:02}"))
            }
        }
    }
}

/// One code's share in one period.
#[derive(Debug, Clone, PartialEq, Serialize, utoipa::ToSchema)]
pub struct ReasonShare {
    pub code: String,
    /// Declines and referrals that gave it as a principal reason.
    pub count: u64,
    /// `count` over the period's declines and referrals.
    pub share: f64,
    /// `share` minus the share in the version's previous period with decisions (absent in its
    /// first period).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub change: Option<f64>,
}

/// One period of one model version.
#[derive(Debug, Clone, PartialEq, Serialize, utoipa::ToSchema)]
pub struct PeriodReasons {
    pub period: String,
    pub model_version: String,
    pub declines: u64,
    pub referrals: u64,
    /// Most frequent first, ties by code.
    pub reasons: Vec<ReasonShare>,
}

/// The trend report.
#[derive(Debug, Clone, PartialEq, Serialize, utoipa::ToSchema)]
pub struct ReasonTrends {
    pub model_id: String,
    pub period: Period,
    pub from: Option<String>,
    pub to: Option<String>,
    /// Versions in order, each's periods in time order.
    pub periods: Vec<PeriodReasons>,
    /// Records whose response could not be read for its reasons (counted, never dropped).
    pub unreadable: u64,
}

#[derive(Default)]
struct Cell {
    declines: u64,
    referrals: u64,
    codes: BTreeMap<String, u64>,
}

/// Counts declines' and referrals' principal reasons as records stream past.
pub struct TrendTally {
    period: Period,
    /// (model version, period) -> counts.
    cells: BTreeMap<(String, String), Cell>,
    unreadable: u64,
}

impl TrendTally {
    pub fn new(period: Period) -> Self {
        TrendTally {
            period,
            cells: BTreeMap::new(),
            unreadable: 0,
        }
    }

    pub fn add_record(&mut self, r: &Record) {
        if r.outcome == Outcome::Approve {
            return;
        }
        let Some(period) = self.period.of(&r.decided_at) else {
            self.unreadable += 1;
            return;
        };
        #[derive(serde::Deserialize)]
        struct Given {
            reasons: Vec<Code>,
        }
        #[derive(serde::Deserialize)]
        struct Code {
            code: String,
        }
        let Ok(given) = serde_json::from_str::<Given>(&r.response) else {
            self.unreadable += 1;
            return;
        };
        let cell = self
            .cells
            .entry((r.model_version.clone(), period))
            .or_default();
        match r.outcome {
            Outcome::Decline => cell.declines += 1,
            _ => cell.referrals += 1,
        }
        for Code { code } in given.reasons {
            *cell.codes.entry(code).or_default() += 1;
        }
    }

    pub fn finish(self, model_id: &str, range: (Option<String>, Option<String>)) -> ReasonTrends {
        let mut periods = Vec::new();
        let mut previous: Option<(String, BTreeMap<String, f64>)> = None;
        for ((version, period), cell) in self.cells {
            let n = (cell.declines + cell.referrals).max(1) as f64;
            let shares: BTreeMap<String, f64> = (cell.codes.iter())
                .map(|(c, &k)| (c.clone(), k as f64 / n))
                .collect();
            let before = previous
                .as_ref()
                .filter(|(v, _)| *v == version)
                .map(|(_, s)| s);
            let mut reasons: Vec<ReasonShare> = (cell.codes.iter())
                .map(|(code, &count)| ReasonShare {
                    code: code.clone(),
                    count,
                    share: shares[code],
                    change: before.map(|b| shares[code] - b.get(code).copied().unwrap_or(0.0)),
                })
                .collect();
            // Codes the previous period gave and this one did not: a share fallen to zero.
            if let Some(b) = before {
                for (code, &was) in b.iter().filter(|(c, _)| !cell.codes.contains_key(*c)) {
                    reasons.push(ReasonShare {
                        code: code.clone(),
                        count: 0,
                        share: 0.0,
                        change: Some(-was),
                    });
                }
            }
            reasons.sort_by(|a, b| b.count.cmp(&a.count).then_with(|| a.code.cmp(&b.code)));
            periods.push(PeriodReasons {
                period,
                model_version: version.clone(),
                declines: cell.declines,
                referrals: cell.referrals,
                reasons,
            });
            previous = Some((version, shares));
        }
        ReasonTrends {
            model_id: model_id.to_string(),
            period: self.period,
            from: range.0,
            to: range.1,
            periods,
            unreadable: self.unreadable,
        }
    }
}

impl ReasonTrends {
    /// One line per period, version and code, with a header.
    pub fn csv(&self) -> String {
        let mut s =
            String::from("period,model_version,declines,referrals,code,count,share,change\n");
        for p in &self.periods {
            for r in &p.reasons {
                let change = r.change.map(|c| c.to_string()).unwrap_or_default();
                let _ = writeln!(
                    s,
                    "{},{},{},{},{},{},{},{}",
                    csv_cell(&p.period),
                    csv_cell(&p.model_version),
                    p.declines,
                    p.referrals,
                    csv_cell(&r.code),
                    r.count,
                    r.share,
                    change
                );
            }
        }
        s
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn periods_are_iso_weeks_and_months() {
        // 2026-12-31 is a Thursday of ISO week 53 of 2026; 2027-01-01 (Friday) too.
        assert_eq!(
            Period::Week.of("2026-12-31T10:00:00.000000Z").unwrap(),
            "2026-W53"
        );
        assert_eq!(
            Period::Week.of("2027-01-01T00:00:00.000000Z").unwrap(),
            "2026-W53"
        );
        assert_eq!(
            Period::Week.of("2027-01-04T00:00:00.000000Z").unwrap(),
            "2027-W01"
        );
        assert_eq!(
            Period::Month.of("2027-01-01T00:00:00.000000Z").unwrap(),
            "2027-01"
        );
        assert_eq!(Period::Week.of("not a time"), None);
    }
}
