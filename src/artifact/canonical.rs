//! One streaming pass over an artifact's bytes: its canonical form (for the digest) and a check
//! that every place the format expects an object holds one.
//!
//! Streaming matters for big ensembles: no intermediate JSON tree is built, so loading a
//! 500-tree model costs little more memory than the compiled model itself. Serde's derived
//! readers accept a JSON array in place of a struct (fields by position), which an artifact
//! must never use; that is refused here, with the path.

use super::ArtifactError;
use serde::de::{DeserializeSeed, Deserializer, Error as _, MapAccess, SeqAccess, Visitor};
use std::fmt;

/// Paths (array indices written `[]`) where the format has an object.
const OBJECTS: &[&str] = &[
    "$",
    "$.identity",
    "$.features[]",
    "$.features[].missing",
    "$.model",
    "$.model.trees[]",
    "$.model.trees[].nodes[]",
    "$.explanation",
    "$.explanation.reference",
    "$.explanation.background[]",
    "$.reasons[]",
    "$.policy",
    "$.policy.scaling",
    "$.policy.rules[]",
];

enum Seg {
    Key(String),
    Index(usize),
}

fn render(path: &[Seg], pattern: bool) -> String {
    let mut s = String::from("$");
    for seg in path {
        match seg {
            Seg::Key(k) => {
                s.push('.');
                s.push_str(k);
            }
            Seg::Index(_) if pattern => s.push_str("[]"),
            Seg::Index(i) => s.push_str(&format!("[{i}]")),
        }
    }
    s
}

/// Canonical bytes of a JSON document: keys sorted by their UTF-8 bytes, no whitespace, strings
/// and numbers as serde_json writes them. Duplicate keys are refused.
pub fn canonicalize(bytes: &[u8]) -> Result<Vec<u8>, ArtifactError> {
    let mut out = Vec::with_capacity(bytes.len());
    let mut path = Vec::new();
    let mut problem = None;
    let mut de = serde_json::Deserializer::from_slice(bytes);
    let result = Canon {
        path: &mut path,
        out: &mut out,
        problem: &mut problem,
    }
    .deserialize(&mut de)
    .and_then(|()| de.end());
    match (result, problem) {
        (_, Some(p)) => Err(p),
        (Err(e), None) => Err(ArtifactError::new(
            "$",
            "json",
            format!("not valid JSON: {e}"),
        )),
        (Ok(()), None) => Ok(out),
    }
}

struct Canon<'a> {
    path: &'a mut Vec<Seg>,
    out: &'a mut Vec<u8>,
    /// A shape problem found on the way (reported with its path, not as a JSON error).
    problem: &'a mut Option<ArtifactError>,
}

impl<'de> DeserializeSeed<'de> for Canon<'_> {
    type Value = ();
    fn deserialize<D: Deserializer<'de>>(self, d: D) -> Result<(), D::Error> {
        d.deserialize_any(self)
    }
}

impl<'de> Visitor<'de> for Canon<'_> {
    type Value = ();

    fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
        f.write_str("a JSON value")
    }

    fn visit_bool<E: serde::de::Error>(self, v: bool) -> Result<(), E> {
        self.out
            .extend_from_slice(if v { b"true" } else { b"false" });
        Ok(())
    }
    fn visit_i64<E: serde::de::Error>(self, v: i64) -> Result<(), E> {
        self.out.extend_from_slice(v.to_string().as_bytes());
        Ok(())
    }
    fn visit_u64<E: serde::de::Error>(self, v: u64) -> Result<(), E> {
        self.out.extend_from_slice(v.to_string().as_bytes());
        Ok(())
    }
    fn visit_f64<E: serde::de::Error>(self, v: f64) -> Result<(), E> {
        serde_json::to_writer(&mut *self.out, &v).map_err(E::custom)
    }
    fn visit_str<E: serde::de::Error>(self, v: &str) -> Result<(), E> {
        serde_json::to_writer(&mut *self.out, v).map_err(E::custom)
    }
    fn visit_unit<E: serde::de::Error>(self) -> Result<(), E> {
        self.out.extend_from_slice(b"null");
        Ok(())
    }

    fn visit_seq<A: SeqAccess<'de>>(self, mut seq: A) -> Result<(), A::Error> {
        if OBJECTS.contains(&render(self.path, true).as_str()) {
            *self.problem = Some(ArtifactError::new(
                render(self.path, false),
                "shape",
                "must be a JSON object, not an array",
            ));
            return Err(A::Error::custom("shape"));
        }
        self.out.push(b'[');
        let mut i = 0;
        loop {
            self.path.push(Seg::Index(i));
            let mut item = Vec::new();
            let more = seq.next_element_seed(Canon {
                path: self.path,
                out: &mut item,
                problem: self.problem,
            })?;
            self.path.pop();
            if more.is_none() {
                break;
            }
            if i > 0 {
                self.out.push(b',');
            }
            self.out.extend_from_slice(&item);
            i += 1;
        }
        self.out.push(b']');
        Ok(())
    }

    fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> Result<(), A::Error> {
        let mut entries: Vec<(String, Vec<u8>)> = Vec::new();
        while let Some(key) = map.next_key::<String>()? {
            self.path.push(Seg::Key(key.clone()));
            if entries.iter().any(|(k, _)| *k == key) {
                *self.problem = Some(ArtifactError::new(
                    render(self.path, false),
                    "shape",
                    "key appears twice in one object",
                ));
                return Err(A::Error::custom("duplicate"));
            }
            let mut value = Vec::new();
            map.next_value_seed(Canon {
                path: self.path,
                out: &mut value,
                problem: self.problem,
            })?;
            self.path.pop();
            entries.push((key, value));
        }
        entries.sort_by(|a, b| a.0.as_bytes().cmp(b.0.as_bytes()));
        self.out.push(b'{');
        for (i, (k, v)) in entries.iter().enumerate() {
            if i > 0 {
                self.out.push(b',');
            }
            serde_json::to_writer(&mut *self.out, k).map_err(A::Error::custom)?;
            self.out.push(b':');
            self.out.extend_from_slice(v);
        }
        self.out.push(b'}');
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn agrees_with_the_value_form() {
        let text = r#"{"b": [1, 2.5, -3, 1e300, "x\u00e9\n"], "a": {"y": true, "x": null}}"#;
        let value: serde_json::Value = serde_json::from_str(text).unwrap();
        assert_eq!(
            canonicalize(text.as_bytes()).unwrap(),
            super::super::canonical_json(&value).into_bytes()
        );
    }

    #[test]
    fn refuses_arrays_where_objects_belong_and_duplicate_keys() {
        let e = canonicalize(br#"{"features": [[1, 2]]}"#).unwrap_err();
        assert_eq!(
            (e.path.as_str(), e.rule.as_str()),
            ("$.features[0]", "shape")
        );
        let e = canonicalize(br#"{"policy": {"scaling": {"pdo": 1, "pdo": 2}}}"#).unwrap_err();
        assert_eq!(e.path, "$.policy.scaling.pdo");
    }
}
