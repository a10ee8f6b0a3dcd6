//! Notice-ready adverse-action content, read from the decision record and never recomputed: the
//! model may have changed since, and the notice must state the reasons as given.
//!
//! Regulation B, 12 CFR 1002.9(a)(2) and (b)(2): a statement of the specific principal reasons.
//! FCRA, 15 U.S.C. 1681m(a) and 1681g(f): where a credit score was used, the score, the key
//! factors that adversely affected it (at most four, plus inquiries where that factor applies)
//! and the date. The wording of the notice itself is the lender's, reviewed by counsel.

use super::{Record, StoreError};
use serde::Serialize;
use serde_json::Value;

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Reason {
    pub rank: u64,
    pub code: String,
    pub text: String,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ScoreDisclosure {
    pub score: i64,
    /// Model reasons in the order given: the factors that adversely affected the score.
    pub key_factors: Vec<Reason>,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct AdverseAction {
    pub decision_id: String,
    pub application_id: String,
    /// The day the decision was made (UTC), and the exact time.
    pub decision_date: String,
    pub decided_at: String,
    /// `decline`, or `refer` (referred for review: not yet a final action).
    pub outcome: String,
    /// Every principal reason in the order given, rule reasons first.
    pub principal_reasons: Vec<Reason>,
    pub credit_score: ScoreDisclosure,
    pub model: ModelIdentity,
    pub source: &'static str,
    pub caution: &'static str,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ModelIdentity {
    pub id: String,
    pub version: String,
    pub sha256: String,
}

/// Why a record has no adverse-action content.
#[derive(Debug, Clone, PartialEq)]
pub enum NoNotice {
    Approved,
    Damaged(StoreError),
}

const CAUTION: &str = "Decision support, not legal advice: the notice's wording, delivery and timing must meet ECOA / Regulation B, FCRA and local law, as reviewed by the lender's compliance counsel.";

/// The content for `record`, or why there is none.
pub fn adverse_action(record: &Record) -> Result<AdverseAction, NoNotice> {
    if record.outcome == "approve" {
        return Err(NoNotice::Approved);
    }
    let response: Value = serde_json::from_str(&record.response).map_err(|e| {
        NoNotice::Damaged(StoreError::Failed(format!(
            "record {} holds an unreadable response: {e}",
            record.decision_id
        )))
    })?;
    let reasons: Vec<(Reason, bool)> = response["reasons"]
        .as_array()
        .map(Vec::as_slice)
        .unwrap_or_default()
        .iter()
        .map(|r| {
            let reason = Reason {
                rank: r["rank"].as_u64().unwrap_or(0),
                code: r["code"].as_str().unwrap_or_default().to_string(),
                text: r["text"].as_str().unwrap_or_default().to_string(),
            };
            (reason, r["source"] == "model")
        })
        .collect();
    Ok(AdverseAction {
        decision_id: record.decision_id.clone(),
        application_id: record.application_id.clone(),
        decision_date: record.decided_at.chars().take(10).collect(),
        decided_at: record.decided_at.clone(),
        outcome: record.outcome.clone(),
        principal_reasons: reasons.iter().map(|(r, _)| r.clone()).collect(),
        credit_score: ScoreDisclosure {
            score: record.score,
            key_factors: (reasons.iter())
                .filter(|(_, model)| *model)
                .map(|(r, _)| r.clone())
                .collect(),
        },
        model: ModelIdentity {
            id: record.model_id.clone(),
            version: record.model_version.clone(),
            sha256: record.model_sha256.clone(),
        },
        source: "read from the decision record as given; not recomputed",
        caution: CAUTION,
    })
}
