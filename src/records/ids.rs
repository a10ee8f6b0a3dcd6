//! Decision ids: UUID version 7 text (RFC 9562): 48 bits of Unix milliseconds, then random
//! bits, so ids sort roughly by time and replicas never need to coordinate.

use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::OnceLock;

static SEED: OnceLock<u64> = OnceLock::new();
static COUNTER: AtomicU64 = AtomicU64::new(0);

/// SplitMix64 finaliser: spreads a counter into 64 well-mixed bits.
fn mix(mut z: u64) -> u64 {
    z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
    z ^ (z >> 31)
}

fn seed() -> u64 {
    *SEED.get_or_init(|| {
        let mut b = [0u8; 8];
        // The OS generator; the time and process id only if it is unavailable.
        if getrandom::fill(&mut b).is_err() {
            let t = std::time::SystemTime::now()
                .duration_since(std::time::UNIX_EPOCH)
                .map(|d| d.as_nanos() as u64)
                .unwrap_or(0);
            b = (t ^ u64::from(std::process::id()).rotate_left(32)).to_le_bytes();
        }
        u64::from_le_bytes(b)
    })
}

/// A new decision id, e.g. `019ad7c2-3f10-7a4b-9c2e-5d6f7a8b9c0d`.
pub fn new_decision_id() -> String {
    let ms = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map(|d| d.as_millis() as u64)
        .unwrap_or(0);
    let n = COUNTER.fetch_add(1, Ordering::Relaxed);
    let a = mix(seed() ^ n.wrapping_mul(0x9e37_79b9_7f4a_7c15));
    let b = mix(a ^ seed().rotate_left(17));
    let hi = (ms << 16) | 0x7000 | (a & 0x0fff);
    let lo = (b & 0x3fff_ffff_ffff_ffff) | 0x8000_0000_0000_0000;
    format!(
        "{:08x}-{:04x}-{:04x}-{:04x}-{:012x}",
        hi >> 32,
        (hi >> 16) & 0xffff,
        hi & 0xffff,
        lo >> 48,
        lo & 0xffff_ffff_ffff
    )
}

/// An id no decision has (version 7 with a zero time), looked up by readiness probes.
pub const PROBE_ID: &str = "00000000-0000-7000-8000-000000000000";

/// Whether `s` has the shape of a decision id (any UUID in lower-case hex).
pub fn is_decision_id(s: &str) -> bool {
    s.len() == 36
        && s.char_indices().all(|(i, c)| match i {
            8 | 13 | 18 | 23 => c == '-',
            _ => c.is_ascii_digit() || ('a'..='f').contains(&c),
        })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ids_are_version_7_variant_10_and_distinct() {
        let ids: std::collections::BTreeSet<String> =
            (0..10_000).map(|_| new_decision_id()).collect();
        assert_eq!(ids.len(), 10_000);
        for id in ids.iter().take(50) {
            assert!(is_decision_id(id), "{id}");
            assert_eq!(&id[14..15], "7", "version nibble (RFC 9562 sec. 5.7)");
            assert!(
                matches!(&id[19..20], "8" | "9" | "a" | "b"),
                "variant bits 10"
            );
        }
    }
}
