//! Observed outcomes: whether an application's loan went on to default, loaded months after
//! the decision, and the decisions they are matched to for back-testing.
//!
//! One outcome per application, append-only: a second one that agrees is a duplicate, one that
//! disagrees a conflict; neither is written, both are counted. An outcome is matched to the
//! application's latest decision under the model (the one acted on); earlier decisions of the
//! same application are superseded, not counted twice.

use super::Outcome;

/// One observed outcome as stored.
#[derive(Debug, Clone, PartialEq)]
pub struct ObservedOutcome {
    pub application_id: String,
    /// Defaulted within the lender's performance window (the lender's own definition).
    pub defaulted: bool,
    /// When the outcome was observed (stored form, see [`super::normalise_time`]).
    pub observed_at: String,
    /// When it was loaded, and by whom: the key's name, or `local:USER` from the command line.
    pub loaded_at: String,
    pub loaded_by: String,
}

/// What loading one outcome did.
#[derive(Debug, Clone, PartialEq)]
pub enum OutcomeInsert {
    Inserted,
    /// The application already has this outcome (same default flag and time): nothing written.
    Duplicate,
    /// The application already has a different outcome: kept, nothing written.
    Conflict {
        defaulted: bool,
        observed_at: String,
    },
    /// No decision of this application is recorded: nothing written.
    UnknownApplication,
}

/// A decision in a back-testing range with its observed outcome, if any.
#[derive(Debug, Clone, PartialEq)]
pub struct DecisionWithOutcome {
    pub decision_id: String,
    pub decided_at: String,
    pub model_version: String,
    pub outcome: Outcome,
    pub probability: f64,
    pub score: i64,
    /// The final action on a referral (`approve`, `decline`, `withdrawn`), when recorded.
    pub final_action: Option<String>,
    pub observed: Option<(bool, String)>,
}

/// Outcomes a store writes in one transaction at most (a load is split into groups this big,
/// so memory holds one group whatever the file's size).
pub const GROUP: usize = 1_000;

/// The rows of a group to write: the first for each application. A later row for the same
/// application is answered by [`settle`] once the first's answer is known.
pub(super) fn firsts(rows: &[ObservedOutcome]) -> Vec<Option<usize>> {
    let mut first: std::collections::HashMap<&str, usize> = Default::default();
    (rows.iter().enumerate())
        .map(|(i, r)| match first.get(r.application_id.as_str()) {
            None => {
                first.insert(&r.application_id, i);
                None
            }
            Some(&j) => Some(j),
        })
        .collect()
}

/// Every row's answer, given the answers of the rows written (`written[i]`, `None` for a
/// later row of an application, which `same_as[i]` names).
pub(super) fn settle(
    rows: &[ObservedOutcome],
    same_as: &[Option<usize>],
    mut written: Vec<Option<OutcomeInsert>>,
) -> Vec<OutcomeInsert> {
    for i in 0..rows.len() {
        if let Some(j) = same_as[i] {
            let (defaulted, observed_at) = (rows[i].defaulted, rows[i].observed_at.as_str());
            written[i] = Some(match &written[j] {
                Some(OutcomeInsert::Conflict {
                    defaulted: d,
                    observed_at: o,
                }) => compare((*d, o), defaulted, observed_at),
                Some(OutcomeInsert::UnknownApplication) => OutcomeInsert::UnknownApplication,
                // Written now or stored already as given: the first row is what is kept.
                _ => compare(
                    (rows[j].defaulted, &rows[j].observed_at),
                    defaulted,
                    observed_at,
                ),
            });
        }
    }
    (written.into_iter())
        .map(|w| w.unwrap_or(OutcomeInsert::UnknownApplication))
        .collect()
}

/// A duplicate when what is kept says the same, else a conflict naming what is kept.
pub(super) fn compare(
    (kept, kept_at): (bool, &str),
    defaulted: bool,
    observed_at: &str,
) -> OutcomeInsert {
    if kept == defaulted && kept_at == observed_at {
        OutcomeInsert::Duplicate
    } else {
        OutcomeInsert::Conflict {
            defaulted: kept,
            observed_at: kept_at.to_string(),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn row(id: &str, defaulted: bool) -> ObservedOutcome {
        ObservedOutcome {
            application_id: id.into(),
            defaulted,
            observed_at: "2027-06-01T00:00:00.000000Z".into(),
            loaded_at: String::new(),
            loaded_by: String::new(),
        }
    }

    #[test]
    fn a_later_row_of_an_application_takes_its_answer_from_the_first() {
        let rows = [
            row("a", true),
            row("a", true),
            row("a", false),
            row("b", false),
            row("b", false),
            row("c", true),
            row("c", true),
        ];
        let same = firsts(&rows);
        assert_eq!(same, [None, Some(0), Some(0), None, Some(3), None, Some(5)]);
        let mut written = vec![None; rows.len()];
        written[0] = Some(OutcomeInsert::Inserted);
        written[3] = Some(OutcomeInsert::UnknownApplication);
        written[5] = Some(OutcomeInsert::Conflict {
            defaulted: false,
            observed_at: "x".into(),
        });
        let out = settle(&rows, &same, written);
        assert_eq!(out[1], OutcomeInsert::Duplicate);
        assert!(matches!(
            out[2],
            OutcomeInsert::Conflict {
                defaulted: true,
                ..
            }
        ));
        assert_eq!(out[4], OutcomeInsert::UnknownApplication);
        assert!(matches!(
            out[6],
            OutcomeInsert::Conflict {
                defaulted: false,
                ..
            }
        ));
    }
}
