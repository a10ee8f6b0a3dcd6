//! Gauss-Legendre quadrature on [0, 1].
//!
//! The Shapley weight s!(k-1-s)!/k! equals the Beta integral of u^s (1-u)^(k-1-s) over [0, 1],
//! so a leaf's Shapley sum becomes the integral of a polynomial of degree k-1, which q-point
//! Gauss-Legendre quadrature computes exactly when 2q - 1 >= k - 1 (the observation behind
//! Linear TreeShap, Yu et al. 2022, arXiv:2209.08192).

/// Nodes and weights of the q-point rule on [0, 1], by Newton's method on the Legendre
/// polynomial P_q (converges to full f64 precision for the small q used here).
pub fn gauss_legendre(q: usize) -> (Vec<f64>, Vec<f64>) {
    let mut nodes = Vec::with_capacity(q);
    let mut weights = Vec::with_capacity(q);
    for i in 0..q {
        // Initial guess (Tricomi), then Newton steps on P_q(x) = 0 in [-1, 1].
        let mut x = (std::f64::consts::PI * (i as f64 + 0.75) / (q as f64 + 0.5)).cos();
        let mut derivative = 0.0;
        for _ in 0..100 {
            let (p, dp) = legendre(q, x);
            derivative = dp;
            let step = p / dp;
            x -= step;
            if step.abs() < 1e-17 {
                break;
            }
        }
        let (_, dp) = legendre(q, x);
        if dp != 0.0 {
            derivative = dp;
        }
        let w = 2.0 / ((1.0 - x * x) * derivative * derivative);
        nodes.push((1.0 - x) / 2.0);
        weights.push(w / 2.0);
    }
    (nodes, weights)
}

/// P_n(x) and its derivative, by the three-term recurrence.
fn legendre(n: usize, x: f64) -> (f64, f64) {
    let (mut p0, mut p1) = (1.0, x);
    if n == 0 {
        return (1.0, 0.0);
    }
    for k in 2..=n {
        let p2 = ((2 * k - 1) as f64 * x * p1 - (k - 1) as f64 * p0) / k as f64;
        p0 = p1;
        p1 = p2;
    }
    let dp = n as f64 * (x * p1 - p0) / (x * x - 1.0);
    (p1, dp)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Exact for every monomial u^m with m <= 2q - 1: the integral is 1/(m+1).
    #[test]
    fn integrates_polynomials_exactly() {
        for q in 1..=8 {
            let (u, w) = gauss_legendre(q);
            assert!(u.iter().all(|&u| u > 0.0 && u < 1.0));
            for m in 0..2 * q {
                let got: f64 = u.iter().zip(&w).map(|(u, w)| w * u.powi(m as i32)).sum();
                assert!(
                    (got - 1.0 / (m as f64 + 1.0)).abs() < 1e-15,
                    "q={q} m={m} got {got}"
                );
            }
        }
    }
}
