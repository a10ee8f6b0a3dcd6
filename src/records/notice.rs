//! Notice-ready adverse-action content, read from the decision record and never recomputed: the
//! model may have changed since, and the notice must state the reasons as given.
//!
//! Regulation B, 12 CFR 1002.9(a)(2) and (b)(2): a statement of the specific principal reasons.
//! FCRA, 15 U.S.C. 1681m(a) and 1681g(f): where a credit score was used, the score, the key
//! factors that adversely affected it (at most four, plus inquiries where that factor applies)
//! and the date. The wording of the notice itself is the lender's, reviewed by counsel.

use super::{ActionTaken, Record, StoreError};
use serde::Serialize;
use serde_json::Value;

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Reason {
    /// Place within its own list (principal reasons or key factors), from 1, in the order the
    /// decision (or the underwriter) gave them.
    pub rank: u64,
    pub code: String,
    pub text: String,
}

/// The credit score disclosure of FCRA 15 U.S.C. 1681g(f)(1), items (A) to (E).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ScoreDisclosure {
    /// (A) The score the decision used.
    pub score: i64,
    /// (B) The range of possible scores under the model (absent for a decision recorded before
    /// decisions carried it).
    pub range: Option<ScoreRange>,
    /// (C) The key factors that adversely affected the score, in the order the decision gave
    /// them: the model's adverse factors, at most four, then the inquiries factor if it was
    /// adverse but not among them (1681g(f)(9)); policy rules are not score factors.
    pub key_factors: Vec<Reason>,
    /// (D) The date the score was created: the decision's date (UTC).
    pub date: String,
    /// (E) Who provided the score (absent as for `range`).
    pub provided_by: Option<String>,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ScoreRange {
    pub min: i64,
    pub max: i64,
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
    /// Whether this is the action taken on the application (Regulation B, 12 CFR 1002.9(a)): a
    /// decline is; a referral is not, the underwriter's decision will be.
    pub final_action: bool,
    pub action_note: &'static str,
    /// Regulation B's statement of specific principal reasons (12 CFR 1002.9(b)(2)), in the
    /// order given, rule reasons first; an inquiries factor added beyond the policy's limit is a
    /// score key factor, not a principal reason.
    pub principal_reasons: Vec<Reason>,
    /// FCRA's score disclosure, a separate list.
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
    /// A referral the underwriter approved.
    ApprovedOnReview,
    /// The applicant withdrew: the lender refused nothing, so there is no adverse action (12 CFR
    /// 1002.2(c)(1)(i), cited from memory).
    Withdrawn,
    Damaged(StoreError),
}

const CAUTION: &str = "Decision support, not legal advice: the notice's wording, delivery and timing must meet ECOA / Regulation B, FCRA and local law, as reviewed by the lender's compliance counsel.";

const DECLINE_NOTE: &str = "The decline is the action taken on the application; a notice of action taken is due within 30 days of a completed application (12 CFR 1002.9(a)(1)).";
const REFER_NOTE: &str = "A referral is not a final action: the application awaits an underwriter, and the notice follows the final decision (12 CFR 1002.9(a)); this content is provisional.";
const REVIEW_DECLINE_NOTE: &str = "The underwriter's decline of the referral is the action taken on the application: the principal reasons and the date are the underwriter's; the score disclosure is the decision's, whose score was used.";

/// Where a reason came from in the decision.
#[derive(Clone, Copy, PartialEq)]
enum From {
    Rule,
    Model,
    InquiryExtra,
}

fn damaged(record: &Record, what: &str) -> NoNotice {
    NoNotice::Damaged(StoreError::Failed(format!(
        "record {} holds {what}",
        record.decision_id
    )))
}

/// A list of reasons from the stored response, each with where it came from, ranked within
/// the list as a notice numbers it. A damaged list is an error, never a shorter list.
fn read_list(record: &Record, list: &Value, name: &str) -> Result<Vec<(Reason, From)>, NoNotice> {
    let Some(items) = list.as_array() else {
        return Err(damaged(record, &format!("no {name} list")));
    };
    (items.iter().enumerate())
        .map(|(i, r)| {
            let (Some(code), Some(text)) = (r["code"].as_str(), r["text"].as_str()) else {
                return Err(damaged(record, &format!("an unreadable entry in {name}")));
            };
            let from = match r["source"].as_str() {
                Some("rule") => From::Rule,
                Some("inquiry_extra") => From::InquiryExtra,
                _ => From::Model,
            };
            let reason = Reason {
                rank: i as u64 + 1,
                code: code.to_string(),
                text: text.to_string(),
            };
            Ok((reason, from))
        })
        .collect()
}

/// The entries of `list` whose source is in `keep`, ranked anew within the result.
fn pick(list: &[(Reason, From)], keep: &[From]) -> Vec<Reason> {
    (list.iter())
        .filter(|(_, f)| keep.contains(f))
        .enumerate()
        .map(|(i, (r, _))| Reason {
            rank: i as u64 + 1,
            ..r.clone()
        })
        .collect()
}

/// The action taken, when, whether final, its note and its principal reasons: the
/// underwriter's for a referral settled on review, else the decision's own.
struct Action {
    outcome: String,
    decided_at: String,
    is_final: bool,
    note: &'static str,
    principal: Vec<Reason>,
}

fn action_taken(record: &Record, reasons: &[(Reason, From)]) -> Result<Action, NoNotice> {
    match &record.final_action {
        Some(f) if f.action == ActionTaken::Approve => Err(NoNotice::ApprovedOnReview),
        Some(f) if f.action == ActionTaken::Withdrawn => Err(NoNotice::Withdrawn),
        Some(f) => {
            let given = f.given_reasons().map_err(NoNotice::Damaged)?;
            Ok(Action {
                outcome: f.action.name().to_string(),
                decided_at: f.decided_at.clone(),
                is_final: true,
                note: REVIEW_DECLINE_NOTE,
                principal: (given.into_iter().enumerate())
                    .map(|(i, g)| Reason {
                        rank: i as u64 + 1,
                        code: g.code,
                        text: g.text,
                    })
                    .collect(),
            })
        }
        None => {
            let is_final = record.outcome != super::Outcome::Refer;
            Ok(Action {
                outcome: record.outcome.name().to_string(),
                decided_at: record.decided_at.clone(),
                is_final,
                note: if is_final { DECLINE_NOTE } else { REFER_NOTE },
                principal: pick(reasons, &[From::Rule, From::Model]),
            })
        }
    }
}

/// The content for `record`, or why there is none.
pub fn adverse_action(record: &Record) -> Result<AdverseAction, NoNotice> {
    if record.outcome == super::Outcome::Approve {
        return Err(NoNotice::Approved);
    }
    let response: Value = serde_json::from_str(&record.response)
        .map_err(|e| damaged(record, &format!("an unreadable response: {e}")))?;
    let reasons = read_list(record, &response["reasons"], "reasons")?;
    // Decisions list their score's key factors apart; a decision recorded before they did
    // gives them among its reasons (the model's, and the extra inquiries factor).
    let key_factors = match &response["score_factors"] {
        Value::Null => pick(&reasons, &[From::Model, From::InquiryExtra]),
        list => pick(
            &read_list(record, list, "score_factors")?,
            &[From::Model, From::InquiryExtra],
        ),
    };
    let scale = &response["score_scale"];
    let range = match (scale["min"].as_i64(), scale["max"].as_i64()) {
        (Some(min), Some(max)) => Some(ScoreRange { min, max }),
        _ => None,
    };
    let action = action_taken(record, &reasons)?;
    Ok(AdverseAction {
        decision_id: record.decision_id.clone(),
        application_id: record.application_id.clone(),
        decision_date: action.decided_at.chars().take(10).collect(),
        decided_at: action.decided_at,
        outcome: action.outcome,
        final_action: action.is_final,
        action_note: action.note,
        principal_reasons: action.principal,
        credit_score: ScoreDisclosure {
            score: record.score,
            range,
            key_factors,
            date: record.decided_at.chars().take(10).collect(),
            provided_by: scale["provider"].as_str().map(str::to_string),
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
