//! Where an ONNX split divides float64 inputs.
//!
//! ONNX-ML tree ensembles compare the runtime's input, usually float32, with thresholds stored as
//! float32 (onnx.ai operator docs, TreeEnsembleClassifier; onnxruntime casts a float64 value to
//! float32 before the model sees it). plumbline compares float64 values. Rounding to float32 is
//! monotone, so every split condition `f32(x) MODE t` holds on a half-line of float64 values, and
//! the import rewrites each threshold to that half-line's end: `x < b` or `x <= b`. The imported
//! model then takes onnxruntime's branch on every input, with no casting at decision time.
//!
//! With a Scaler in front of the trees the condition is `f32((f32(x) - offset) * scale) MODE t`,
//! still monotone in `x`; the half-line's end is found by bisection over the ordered float32 (or
//! float64) values, which is exact because the domain is finite.

/// The float64 values `x < at` (`strict`) or `x <= at`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Below {
    pub at: f64,
    pub strict: bool,
}

impl Below {
    /// Every finite value.
    pub const ALL: Below = Below {
        at: f64::MAX,
        strict: false,
    };

    pub fn contains(&self, x: f64) -> bool {
        if self.strict {
            x < self.at
        } else {
            x <= self.at
        }
    }
}

/// A split in plumbline's terms: the condition is true on `below`, or on its complement.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Split {
    pub below: Below,
    /// `true`: the ONNX condition holds for values in `below` (its true child goes left).
    pub true_below: bool,
}

/// The ONNX-ML node modes plumbline reads (BRANCH_EQ / NEQ, set membership, are refused).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Mode {
    Leq,
    Lt,
    Gte,
    Gt,
}

impl Mode {
    pub fn holds(self, y: f64, t: f64) -> bool {
        match self {
            Mode::Leq => y <= t,
            Mode::Lt => y < t,
            Mode::Gte => y >= t,
            Mode::Gt => y > t,
        }
    }
}

/// The precision the runtime feeds the trees with.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Precision {
    Float32,
    Float64,
}

/// A Scaler column (ai.onnx.ml Scaler: `y = (x - offset) * scale`, computed in the input's type,
/// written out as float32).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Affine {
    pub offset: f32,
    pub scale: f32,
}

impl Affine {
    /// What onnxruntime's Scaler writes for input `x` of the given precision.
    fn apply(self, x: f64, precision: Precision) -> f64 {
        match precision {
            Precision::Float32 => ((x as f32 - self.offset) * self.scale) as f64,
            Precision::Float64 => ((x - self.offset as f64) * self.scale as f64) as f32 as f64,
        }
    }
}

/// The float64 values `x` with `f32(x) <= t` (round to nearest, ties to even; `t` not NaN).
///
/// The end is the midpoint between `t` and the next float32 up (exact in float64); the midpoint
/// itself rounds to whichever of the two has an even significand, so it belongs to the set when
/// `t` does.
pub fn rounds_at_or_below(t: f32) -> Below {
    /// 2^128 - 2^103: float64 values from here on round to float32 infinity.
    const OVERFLOW: f64 = 340282356779733661637539395458142568448.0;
    if t == f32::INFINITY {
        return Below::ALL;
    }
    if t == f32::NEG_INFINITY {
        // Only values that round to -inf; the tie at -OVERFLOW goes to -inf (even).
        return Below {
            at: -OVERFLOW,
            strict: false,
        };
    }
    let up = if t == f32::MAX {
        OVERFLOW * 2.0 - f32::MAX as f64 // 2^128, the rounding neighbour above MAX
    } else {
        t.next_up() as f64
    };
    Below {
        at: (t as f64 + up) / 2.0,
        strict: t.to_bits() & 1 == 1,
    }
}

/// Total order of non-NaN float32 values as integers (-inf lowest, -0 just below +0).
fn key32(v: f32) -> u32 {
    let b = v.to_bits();
    if b >> 31 == 1 {
        !b
    } else {
        b | 0x8000_0000
    }
}

fn from_key32(k: u32) -> f32 {
    f32::from_bits(if k >> 31 == 1 { k & 0x7fff_ffff } else { !k })
}

fn key64(v: f64) -> u64 {
    let b = v.to_bits();
    if b >> 63 == 1 {
        !b
    } else {
        b | 0x8000_0000_0000_0000
    }
}

fn from_key64(k: u64) -> f64 {
    f64::from_bits(if k >> 63 == 1 {
        k & 0x7fff_ffff_ffff_ffff
    } else {
        !k
    })
}

/// The ordered finite-or-infinite values of one precision, as integer keys.
#[derive(Clone, Copy)]
struct Domain(Precision);

impl Domain {
    fn bounds(self) -> (u64, u64) {
        match self.0 {
            Precision::Float32 => (key32(f32::NEG_INFINITY) as u64, key32(f32::INFINITY) as u64),
            Precision::Float64 => (key64(f64::NEG_INFINITY), key64(f64::INFINITY)),
        }
    }

    fn value(self, k: u64) -> f64 {
        match self.0 {
            Precision::Float32 => from_key32(k as u32) as f64,
            Precision::Float64 => from_key64(k),
        }
    }

    /// The float64 inputs that the runtime sees as at most the domain value of key `k`.
    fn at_or_below(self, k: u64) -> Below {
        match self.0 {
            Precision::Float32 => rounds_at_or_below(from_key32(k as u32)),
            Precision::Float64 => match from_key64(k) {
                // Only -inf: no finite input.
                v if v == f64::NEG_INFINITY => Below {
                    at: -f64::MAX,
                    strict: true,
                },
                v => Below {
                    at: v.min(f64::MAX),
                    strict: false,
                },
            },
        }
    }
}

/// Smallest key in `[lo, hi]` where the monotone `p` (false then true) holds, if any.
fn first_true(mut lo: u64, hi: u64, p: impl Fn(u64) -> bool) -> Option<u64> {
    if !p(hi) {
        return None;
    }
    let mut hi = hi;
    while lo < hi {
        let mid = lo + (hi - lo) / 2;
        if p(mid) {
            hi = mid;
        } else {
            lo = mid + 1;
        }
    }
    Some(lo)
}

/// The plumbline split equivalent to the ONNX condition `g(x) MODE t` on every finite float64
/// `x`, where `g` is the runtime's view of the input (its precision, then the Scaler column if
/// any). `scale` must not be 0 or non-finite (checked by the caller).
pub fn split(mode: Mode, t: f64, precision: Precision, scaler: Option<Affine>) -> Split {
    let domain = Domain(precision);
    let g = |k: u64| {
        let x = domain.value(k);
        match scaler {
            Some(a) => a.apply(x, precision),
            None => x,
        }
    };
    let holds = |k: u64| mode.holds(g(k), t);
    let (lo, hi) = domain.bounds();
    // The condition's true set is a down-set of inputs when the mode bounds from above and the
    // view rises, or the mode bounds from below and the view falls; else an up-set.
    let rising = scaler.is_none_or(|a| a.scale > 0.0);
    let down = matches!(mode, Mode::Leq | Mode::Lt) == rising;
    if down {
        // True up to the last key where it holds: find the first key where it fails.
        match first_true(lo, hi, |k| !holds(k)) {
            None => Split {
                below: Below::ALL,
                true_below: true,
            },
            Some(k) if k == lo => Split {
                below: Below::ALL,
                true_below: false,
            },
            Some(k) => Split {
                below: domain.at_or_below(k - 1),
                true_below: true,
            },
        }
    } else {
        match first_true(lo, hi, holds) {
            None => Split {
                below: Below::ALL,
                true_below: false,
            },
            Some(k) if k == lo => Split {
                below: Below::ALL,
                true_below: true,
            },
            Some(k) => Split {
                below: domain.at_or_below(k - 1),
                true_below: false,
            },
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The rewrite agrees with casting then comparing, at and around `t`: float32 neighbours and
    /// float64 values either side of every midpoint.
    fn check(mode: Mode, t: f32, scaler: Option<Affine>) {
        let s = split(mode, t as f64, Precision::Float32, scaler);
        let mut probes = Vec::new();
        let mut v = t;
        for _ in 0..3 {
            v = v.next_down();
        }
        for _ in 0..7 {
            let (lo, hi) = (v as f64, v.next_up() as f64);
            let mid = (lo + hi) / 2.0;
            probes.extend([lo, mid.next_down(), mid, mid.next_up()]);
            v = v.next_up();
        }
        for x in probes.into_iter().filter(|x| x.is_finite()) {
            let y = match scaler {
                Some(a) => ((x as f32 - a.offset) * a.scale) as f64,
                None => x as f32 as f64,
            };
            let want = mode.holds(y, t as f64);
            let got = s.below.contains(x) == s.true_below;
            assert_eq!(got, want, "{mode:?} {t} at {x:e} ({s:?})");
        }
    }

    #[test]
    fn float32_rounding_boundaries() {
        for t in [
            0.8712584_f32,
            -0.2490637,
            1.0,
            -2.0,
            0.0,
            -0.0,
            f32::MIN_POSITIVE,
            -1.0e-45,
            1.0e-45,
            f32::MAX,
            -f32::MAX,
            35.5,
            16777216.0,
        ] {
            for mode in [Mode::Leq, Mode::Lt, Mode::Gte, Mode::Gt] {
                check(mode, t, None);
            }
        }
    }

    #[test]
    fn rounds_at_or_below_matches_the_closed_form() {
        // 1.0 has an even significand: the midpoint to the next float32 rounds down to it.
        let b = rounds_at_or_below(1.0);
        assert_eq!(b.at, 1.0 + f32::EPSILON as f64 / 2.0);
        assert!(!b.strict);
        assert_eq!((b.at as f32), 1.0);
        // Its successor is odd: the midpoint above it rounds up, so it is excluded.
        let t = 1.0f32.next_up();
        assert!(rounds_at_or_below(t).strict);
    }

    #[test]
    fn scaler_in_front_is_exact() {
        let a = Affine {
            offset: 0.0416165,
            scale: 1.024263,
        };
        let neg = Affine {
            offset: -3.25,
            scale: -0.37,
        };
        for t in [0.8712584_f32, -1.0, 0.0, 2.5] {
            for mode in [Mode::Leq, Mode::Lt, Mode::Gte, Mode::Gt] {
                // Probe around the input that maps onto the threshold.
                for sc in [a, neg] {
                    let x0 = t / sc.scale + sc.offset;
                    let s = split(mode, t as f64, Precision::Float32, Some(sc));
                    let mut v = x0;
                    for _ in 0..4 {
                        v = v.next_down();
                    }
                    for _ in 0..9 {
                        for x in [v as f64, (v as f64 + v.next_up() as f64) / 2.0] {
                            let y = ((x as f32 - sc.offset) * sc.scale) as f64;
                            assert_eq!(
                                s.below.contains(x) == s.true_below,
                                mode.holds(y, t as f64),
                                "{mode:?} {t} {sc:?} at {x:e}"
                            );
                        }
                        v = v.next_up();
                    }
                }
            }
        }
    }

    #[test]
    fn float64_input_keeps_the_threshold() {
        let s = split(Mode::Leq, 0.1, Precision::Float64, None);
        assert_eq!(
            s,
            Split {
                below: Below {
                    at: 0.1,
                    strict: false
                },
                true_below: true
            }
        );
        let s = split(Mode::Gt, 0.1, Precision::Float64, None);
        assert_eq!(s.below.at, 0.1);
        assert!(!s.true_below);
    }

    #[test]
    fn constant_conditions() {
        let s = split(Mode::Leq, f64::INFINITY, Precision::Float32, None);
        assert_eq!((s.below, s.true_below), (Below::ALL, true));
        let s = split(Mode::Lt, f64::NEG_INFINITY, Precision::Float32, None);
        assert_eq!((s.below, s.true_below), (Below::ALL, false));
    }
}
