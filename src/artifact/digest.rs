//! The artifact digest: SHA-256 over a canonical JSON form, so that re-indenting or reordering
//! keys does not change a model's identity but any change of content does.
//!
//! Canonical form: object keys sorted by their UTF-8 bytes, no insignificant whitespace, strings
//! escaped as serde_json writes them, numbers in serde_json's shortest round-trip form.

use serde_json::Value;
use sha2::{Digest, Sha256};

/// The canonical text of `value` (text by type, so a record's request can never be empty
/// beside a real digest).
pub fn canonical_json(value: &Value) -> String {
    let mut out = String::new();
    write(value, &mut out);
    out
}

fn write(value: &Value, out: &mut String) {
    match value {
        Value::Object(map) => {
            let mut keys: Vec<&String> = map.keys().collect();
            keys.sort();
            out.push('{');
            for (i, k) in keys.into_iter().enumerate() {
                if i > 0 {
                    out.push(',');
                }
                write_string(k, out);
                out.push(':');
                write(&map[k], out);
            }
            out.push('}');
        }
        Value::Array(items) => {
            out.push('[');
            for (i, v) in items.iter().enumerate() {
                if i > 0 {
                    out.push(',');
                }
                write(v, out);
            }
            out.push(']');
        }
        Value::String(s) => write_string(s, out),
        other => out.push_str(&other.to_string()),
    }
}

fn write_string(s: &str, out: &mut String) {
    out.push_str(&Value::String(s.to_string()).to_string());
}

pub fn sha256_hex(bytes: &[u8]) -> String {
    Sha256::digest(bytes)
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn key_order_and_whitespace_do_not_matter() {
        let a: Value =
            serde_json::from_str(r#"{"b": [1, 2.5], "a": {"y": "x", "x": null}}"#).unwrap();
        let b: Value = serde_json::from_str(r#"{"a":{"x":null,"y":"x"},"b":[1,2.5]}"#).unwrap();
        assert_eq!(canonical_json(&a), canonical_json(&b));
        assert_eq!(
            canonical_json(&a),
            r#"{"a":{"x":null,"y":"x"},"b":[1,2.5]}"#
        );
    }

    // FIPS 180-4 test vector: SHA-256("abc").
    #[test]
    fn sha256_known_vector() {
        assert_eq!(
            sha256_hex(b"abc"),
            "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
        );
    }
}
