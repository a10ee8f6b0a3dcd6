//! Shapley weights, tabulated once.

use std::sync::OnceLock;

/// Largest number of distinct columns on one root-to-leaf path that the tree explainers handle.
pub const MAX_PATH_COLUMNS: usize = 64;

/// `binom(n, r)` in f64 for n <= 128 (exact to f64 rounding).
fn binom(n: usize, r: usize) -> f64 {
    let r = r.min(n - r);
    let mut b = 1.0f64;
    for i in 0..r {
        b = b * (n - i) as f64 / (i + 1) as f64;
    }
    b
}

/// `shapley(k)[s]` = s! (k-1-s)! / k!: the weight of a coalition of size s among k players.
pub fn shapley(k: usize) -> &'static [f64] {
    static TABLE: OnceLock<Vec<Vec<f64>>> = OnceLock::new();
    let t = TABLE.get_or_init(|| {
        (0..=MAX_PATH_COLUMNS)
            .map(|k| (0..k).map(|s| 1.0 / (k as f64 * binom(k - 1, s))).collect())
            .collect()
    });
    &t[k]
}

/// For the game "reach the leaf iff all of A (size a) and none of B (size b) are in the
/// coalition": Shapley value of a member of A is `unanimity(a, b)`; of B, `-unanimity(b, a)`.
/// Equals (a-1)! b! / (a+b)!.
pub fn unanimity(a: usize, b: usize) -> f64 {
    static TABLE: OnceLock<Vec<f64>> = OnceLock::new();
    let n = MAX_PATH_COLUMNS + 1;
    let t = TABLE.get_or_init(|| {
        let mut t = vec![0.0; n * n];
        for a in 1..n {
            for b in 0..n {
                t[a * n + b] = 1.0 / ((a + b) as f64 * binom(a + b - 1, b));
            }
        }
        t
    });
    t[a * n + b]
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn shapley_weights_sum_to_one_over_coalitions() {
        // Sum over s of binom(k-1, s) * w(s, k) = 1 for each k: a player's weights form a
        // probability distribution over the coalitions it can join.
        for k in 1..=MAX_PATH_COLUMNS {
            let total: f64 = (0..k).map(|s| binom(k - 1, s) * shapley(k)[s]).sum();
            assert!((total - 1.0).abs() < 1e-12, "k={k} total={total}");
        }
    }

    #[test]
    fn unanimity_small_cases() {
        assert_eq!(unanimity(1, 0), 1.0);
        assert_eq!(unanimity(2, 0), 0.5);
        assert_eq!(unanimity(1, 1), 0.5);
        // (2-1)! 1! / 3! = 1/6
        assert!((unanimity(2, 1) - 1.0 / 6.0).abs() < 1e-15);
    }
}
