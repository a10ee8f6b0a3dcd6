//! API keys and roles. Keys are stored as SHA-256 digests, compared in constant time, and never
//! logged; a request names its key with `Authorization: Bearer <key>`.

use super::problem::Problem;
use serde::Deserialize;
use sha2::{Digest, Sha256};

/// What a key may do.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize, serde::Serialize, clap::ValueEnum)]
#[serde(rename_all = "snake_case")]
pub enum Role {
    /// Loan-origination systems: decide, list models.
    Scoring,
    /// Compliance staff: records and fairness reports, list models.
    Review,
    /// Underwriters: record the final action on a referred decision, read that decision.
    Underwriting,
    /// Operators: everything, including model reload.
    Admin,
}

impl Role {
    pub fn name(self) -> &'static str {
        match self {
            Role::Scoring => "scoring",
            Role::Review => "review",
            Role::Underwriting => "underwriting",
            Role::Admin => "admin",
        }
    }
}

/// One entry of a key file: `[{"name": "los-prod", "role": "scoring", "sha256": "<hex>"}]`.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
struct KeySpec {
    name: String,
    role: Role,
    sha256: String,
}

#[derive(Debug, Clone)]
pub struct Key {
    pub name: String,
    pub role: Role,
    digest: [u8; 32],
}

/// A key file that does not parse, naming the entry at fault.
#[derive(Debug, thiserror::Error)]
pub enum KeyFileError {
    #[error("key file: {0}")]
    Json(#[from] serde_json::Error),
    #[error("key file entry {entry} ({name}): sha256 must be 64 hex digits")]
    Digest { entry: usize, name: String },
}

/// The keys the service accepts; `None` inside [`Auth`] means auth was turned off on purpose.
#[derive(Debug, Clone)]
pub struct Keys(Vec<Key>);

impl Keys {
    /// Parses a key file's JSON; errors name the entry.
    pub fn from_json(text: &str) -> Result<Keys, KeyFileError> {
        let specs: Vec<KeySpec> = serde_json::from_str(text)?;
        let mut keys = Vec::new();
        for (entry, s) in specs.into_iter().enumerate() {
            let Some(bytes) = hex32(&s.sha256) else {
                return Err(KeyFileError::Digest {
                    entry,
                    name: s.name,
                });
            };
            keys.push(Key {
                name: s.name,
                role: s.role,
                digest: bytes,
            });
        }
        Ok(Keys(keys))
    }

    pub fn len(&self) -> usize {
        self.0.len()
    }

    pub fn is_empty(&self) -> bool {
        self.0.is_empty()
    }

    /// The key whose digest matches, comparing against every key in constant time.
    fn find(&self, presented: &str) -> Option<&Key> {
        let digest: [u8; 32] = Sha256::digest(presented.as_bytes()).into();
        let mut found = None;
        for key in &self.0 {
            let diff = key
                .digest
                .iter()
                .zip(&digest)
                .fold(0u8, |acc, (a, b)| acc | (a ^ b));
            if diff == 0 && found.is_none() {
                found = Some(key);
            }
        }
        found
    }
}

fn hex32(s: &str) -> Option<[u8; 32]> {
    if s.len() != 64 {
        return None;
    }
    let mut out = [0u8; 32];
    for (i, chunk) in s.as_bytes().chunks(2).enumerate() {
        out[i] = u8::from_str_radix(std::str::from_utf8(chunk).ok()?, 16).ok()?;
    }
    Some(out)
}

/// SHA-256 of a key.
pub fn digest(key: &str) -> [u8; 32] {
    Sha256::digest(key.as_bytes()).into()
}

/// Whether `authorization` presents the key whose digest is `expected`, compared in constant
/// time.
pub fn presents(authorization: Option<&str>, expected: &[u8; 32]) -> bool {
    let presented = (authorization.and_then(|h| h.split_once(' ')))
        .filter(|(scheme, _)| scheme.eq_ignore_ascii_case("bearer"))
        .map(|(_, key)| digest(key.trim()));
    presented.is_some_and(|d| {
        d.iter()
            .zip(expected)
            .fold(0u8, |acc, (a, b)| acc | (a ^ b))
            == 0
    })
}

/// SHA-256 of a key, as written into key files.
pub fn key_digest_hex(key: &str) -> String {
    crate::artifact::sha256_hex(key.as_bytes())
}

#[derive(Debug, Clone)]
pub struct Auth(pub Option<Keys>);

impl Auth {
    /// The caller's role if its key may use a route open to `allowed`.
    pub fn check(
        &self,
        authorization: Option<&str>,
        allowed: &[Role],
    ) -> Result<Option<Role>, Problem> {
        Ok(self.caller(authorization, allowed)?.map(|k| k.role))
    }

    /// As [`Self::check`], the caller's key (its name and role); `None` when auth is off.
    pub fn caller(
        &self,
        authorization: Option<&str>,
        allowed: &[Role],
    ) -> Result<Option<Key>, Problem> {
        let key = self.identify(authorization)?;
        if let Some(k) = &key {
            permit(k, allowed)?;
        }
        Ok(key)
    }

    /// The presented key, if it is one of ours (`None` when auth is off; 401 otherwise).
    fn identify(&self, authorization: Option<&str>) -> Result<Option<Key>, Problem> {
        let Some(keys) = &self.0 else {
            return Ok(None);
        };
        // The scheme name is case-insensitive (RFC 9110 section 11.1).
        let presented = authorization
            .and_then(|h| h.split_once(' '))
            .filter(|(scheme, _)| scheme.eq_ignore_ascii_case("bearer"))
            .map(|(_, key)| key.trim())
            .filter(|k| !k.is_empty());
        presented
            .and_then(|k| keys.find(k))
            .cloned()
            .map(Some)
            .ok_or_else(Problem::unauthorized)
    }

    /// Admits `req` to a route open to `allowed`. The caller is noted on the request (for its
    /// log line) as soon as its key is known, so a refused role is logged with its name too.
    pub fn admit(&self, req: &actix_web::HttpRequest, allowed: &[Role]) -> Result<Caller, Problem> {
        use actix_web::HttpMessage;
        let header = (req.headers().get("authorization")).and_then(|v| v.to_str().ok());
        let key = self.identify(header)?;
        let caller = match &key {
            Some(k) => Caller {
                name: k.name.clone(),
                role: Some(k.role),
            },
            None => Caller {
                name: Caller::UNAUTHENTICATED.into(),
                role: None,
            },
        };
        req.extensions_mut().insert(caller.clone());
        if let Some(k) = &key {
            permit(k, allowed)?;
        }
        Ok(caller)
    }
}

/// Who is calling: a key's name and role, never the key.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Caller {
    pub name: String,
    /// `None` with authentication off.
    pub role: Option<Role>,
}

impl Caller {
    /// The name recorded for requests when authentication is off.
    pub const UNAUTHENTICATED: &'static str = "unauthenticated";

    pub fn role_name(&self) -> &'static str {
        self.role.map_or("none", Role::name)
    }
}

/// 403 unless `key`'s role may use a route open to `allowed` (admin keys may use every route).
fn permit(key: &Key, allowed: &[Role]) -> Result<(), Problem> {
    if key.role == Role::Admin || allowed.contains(&key.role) {
        return Ok(());
    }
    let needed = (allowed.iter().map(|r| r.name()))
        .collect::<Vec<_>>()
        .join(" or ");
    Err(Problem::forbidden(key.role.name(), &needed))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn roles_and_keys() {
        let file = format!(
            r#"[{{"name": "los", "role": "scoring", "sha256": "{}"}}, {{"name": "ops", "role": "admin", "sha256": "{}"}}]"#,
            key_digest_hex("s3cret-scoring"),
            key_digest_hex("s3cret-admin")
        );
        let auth = Auth(Some(Keys::from_json(&file).unwrap()));
        assert_eq!(
            auth.check(Some("Bearer s3cret-scoring"), &[Role::Scoring])
                .unwrap(),
            Some(Role::Scoring)
        );
        assert_eq!(
            auth.check(Some("Bearer s3cret-scoring"), &[Role::Admin])
                .unwrap_err()
                .status,
            403
        );
        assert_eq!(
            auth.check(Some("Bearer s3cret-admin"), &[Role::Review])
                .unwrap(),
            Some(Role::Admin)
        );
        assert_eq!(
            auth.check(Some("Bearer wrong"), &[Role::Scoring])
                .unwrap_err()
                .status,
            401
        );
        assert_eq!(auth.check(None, &[Role::Scoring]).unwrap_err().status, 401);
        assert_eq!(Auth(None).check(None, &[Role::Admin]).unwrap(), None);
        assert!(Keys::from_json(r#"[{"name": "x", "role": "scoring", "sha256": "abc"}]"#).is_err());
    }
}
