//! Opaque pagination cursors: the (decided_at, decision_id) of the last record of a page, hex
//! encoded so clients treat them as tokens.

use super::ids::is_decision_id;

#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Cursor {
    pub decided_at: String,
    pub decision_id: String,
}

impl Cursor {
    pub fn after(record: &super::Record) -> Self {
        Cursor {
            decided_at: record.decided_at.clone(),
            decision_id: record.decision_id.clone(),
        }
    }

    pub fn encode(&self) -> String {
        format!("{}|{}", self.decided_at, self.decision_id)
            .bytes()
            .map(|b| format!("{b:02x}"))
            .collect()
    }

    /// `None` for anything this build did not encode.
    pub fn decode(token: &str) -> Option<Cursor> {
        if !token.len().is_multiple_of(2) || token.len() > 256 {
            return None;
        }
        let bytes: Option<Vec<u8>> = (0..token.len())
            .step_by(2)
            .map(|i| u8::from_str_radix(token.get(i..i + 2)?, 16).ok())
            .collect();
        let text = String::from_utf8(bytes?).ok()?;
        let (at, id) = text.split_once('|')?;
        let normal = super::normalise_time(at, false).ok()?;
        (normal == at && is_decision_id(id)).then(|| Cursor {
            decided_at: at.to_string(),
            decision_id: id.to_string(),
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn round_trips_and_refuses_tampering() {
        let c = Cursor {
            decided_at: "2026-12-02T01:02:03.000004Z".into(),
            decision_id: "019ad7c2-3f10-7a4b-9c2e-5d6f7a8b9c0d".into(),
        };
        assert_eq!(Cursor::decode(&c.encode()), Some(c.clone()));
        for bad in ["", "zz", "abc", &c.encode()[2..], "7c", &"0".repeat(300)] {
            assert_eq!(Cursor::decode(bad), None, "{bad}");
        }
    }
}
