//! The per-row arithmetic of the logit and log links, made cheap enough to
//! run tens of thousands of times per gradient.
//!
//! A logit-link row needs `softplus(η) = log(1 + e^η)` and
//! `logistic(η) = 1 / (1 + e^−η)`. Both follow from one number,
//! `t = e^−|η|` in (0, 1]:
//! `softplus(η) = max(η, 0) + log(1 + t)` and
//! `logistic(η) = (η ≥ 0 ? 1 : t) / (1 + t)`.
//! A log-link row needs `e^η` alone. Here `e^x` and `log(1 + t)` (for t in
//! [0, 1]) are written out as short polynomials with no branches and no
//! library calls, so the compiler can keep them in registers and vectorise
//! the loop over rows. Both are accurate to a few units in the last place
//! (checked against the standard library in the tests below).
//!
//! * `e^x`: `x = n·ln 2 + r` with |r| ≤ ln 2 / 2 (ln 2 split in a high part
//!   with trailing zero bits and a low part, so `n·ln2_hi` is exact — the
//!   Cody–Waite reduction, constants as in fdlibm's `e_exp.c`, recalled);
//!   `e^r` by its Taylor series to degree 13 (remainder below 5e-18);
//!   `2^n` written straight into the exponent bits.
//! * `log(1 + t)`: `2·atanh(s)` with `s = t / (2 + t)`, or, for
//!   `t > √2 − 1`, `ln 2 + 2·atanh(s)` with `s = (t − 1) / (t + 3)`; either
//!   way |s| ≤ 0.1716 and the odd series of atanh to `s¹⁹` leaves an error
//!   below 3e-17 relative (the first term left out, `s²⁰/21`, over 1).
//!
//! Every product that is added on is a fused multiply-add (`mul_add`, one
//! rounding), so the results are the same bits whether the processor does
//! it in one instruction or the library emulates it; the logit row divides
//! once, for `s` and the logistic together.

use std::f64::consts::{LN_2, LOG2_E, SQRT_2};

/// High part of ln 2 (its low 32 bits are zero, so `n · LN2_HI` is exact
/// for |n| < 2²⁰).
const LN2_HI: f64 = 6.931_471_803_691_238_164_90e-1;
/// ln 2 − LN2_HI.
const LN2_LO: f64 = 1.908_214_929_270_587_700_02e-10;
/// 1.5 · 2⁵²: adding it rounds a number of size below 2⁵¹ to an integer.
const ROUNDER: f64 = 6_755_399_441_055_744.0;
/// Below this `e^x` is returned as `e^−700`, about 1e-304, which is zero
/// for every sum it enters.
const FLOOR: f64 = -700.0;
/// Above this `e^x` is returned as infinity (e^709 ≈ 8e307 is the largest
/// power this reduction writes into the exponent bits; the standard
/// library overflows at 709.78).
const CEILING: f64 = 709.0;

/// 1/k! for k = 13 down to 0: the Taylor coefficients of e^r, highest first.
const EXP_TERMS: [f64; 14] = exp_terms();

const fn exp_terms() -> [f64; 14] {
    let mut terms = [1.0; 14];
    let mut k = 1;
    while k < 14 {
        // terms[13 − k] = 1/k! = terms[14 − k] / k
        terms[13 - k] = terms[14 - k] / k as f64;
        k += 1;
    }
    terms
}
/// 1/(2k + 1) for k = 9 down to 0: the coefficients of atanh(s)/s in s².
const ATANH_TERMS: [f64; 10] = [
    1.0 / 19.0, 1.0 / 17.0, 1.0 / 15.0, 1.0 / 13.0, 1.0 / 11.0,
    1.0 / 9.0, 1.0 / 7.0, 1.0 / 5.0, 1.0 / 3.0, 1.0,
];

// Each function below works on an array of `N` independent values, one
// step at a time across all of them: the steps of different values do not
// wait on each other, so the processor overlaps them, and each step over
// the array compiles to a few vector instructions.

/// `e^x` of every value: `e^−700` below −700, infinity above 709.
#[inline(always)]
pub fn exp<const N: usize>(x: &[f64; N]) -> [f64; N] {
    let mut r = [0.0; N];
    let mut scale = [0.0; N];
    for k in 0..N {
        let x = x[k].clamp(FLOOR, CEILING);
        let shifted = x.mul_add(LOG2_E, ROUNDER);
        let n = shifted - ROUNDER;
        r[k] = (-n).mul_add(LN2_LO, (-n).mul_add(LN2_HI, x));
        // The low bits of `shifted` hold n + 2⁵¹ (as an integer); rebuild 2ⁿ.
        let n_bits = (shifted.to_bits() as i64).wrapping_sub(ROUNDER.to_bits() as i64);
        scale[k] = f64::from_bits(((n_bits + 1023) << 52) as u64);
    }
    // Taylor series of e^r to degree 13, Horner form.
    let mut p = [0.0_f64; N];
    for &coefficient in &EXP_TERMS {
        for k in 0..N {
            p[k] = p[k].mul_add(r[k], coefficient);
        }
    }
    for k in 0..N {
        p[k] = if x[k] > CEILING { f64::INFINITY } else { p[k] * scale[k] };
    }
    p
}

/// The ratio `s = numerator / denominator` whose `2·atanh(s)`, plus the
/// offset, is `log(1 + t)` (module doc).
#[inline(always)]
fn atanh_argument(t: f64) -> (f64, f64, f64) {
    if t > SQRT_2 - 1.0 {
        (t - 1.0, t + 3.0, LN_2)
    } else {
        (t, t + 2.0, 0.0)
    }
}

/// `offset + 2·atanh(s)` of every value, by the series of the module doc.
#[inline(always)]
fn atanh_series<const N: usize>(s: &[f64; N], offset: &[f64; N]) -> [f64; N] {
    // atanh(s) / s = Σ s^(2k) / (2k + 1), k = 0..=9, Horner in s².
    let mut s2 = [0.0; N];
    for k in 0..N {
        s2[k] = s[k] * s[k];
    }
    let mut q = [0.0; N];
    for &inverse in &ATANH_TERMS {
        for k in 0..N {
            q[k] = s2[k].mul_add(q[k], inverse);
        }
    }
    for k in 0..N {
        q[k] = (2.0 * s[k]).mul_add(q[k], offset[k]);
    }
    q
}

/// `(softplus(η), logistic(η))` of every linear predictor, one exponential
/// and one division each: with `d` the denominator of the atanh argument,
/// `1 / (d·(1 + t))` serves both `s = n / d` and `logistic = a / (1 + t)`.
#[inline(always)]
pub fn softplus_and_logistic<const N: usize>(eta: &[f64; N]) -> ([f64; N], [f64; N]) {
    let mut minus_abs = [0.0; N];
    for k in 0..N {
        minus_abs[k] = -eta[k].abs();
    }
    let t = exp(&minus_abs);
    let mut s = [0.0; N];
    let mut offset = [0.0; N];
    let mut logistic = [0.0; N];
    for k in 0..N {
        let (numerator, denominator, shift) = atanh_argument(t[k]);
        let one_plus_t = 1.0 + t[k];
        let inverse = 1.0 / (denominator * one_plus_t);
        s[k] = numerator * one_plus_t * inverse;
        offset[k] = shift;
        let upper = if eta[k] >= 0.0 { 1.0 } else { t[k] };
        logistic[k] = upper * denominator * inverse;
    }
    let mut softplus = atanh_series(&s, &offset);
    for k in 0..N {
        softplus[k] += eta[k].max(0.0);
    }
    (softplus, logistic)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::family::{logistic, softplus};

    /// `log(1 + t)` of every value, for values `t` in [0, 1], by the same
    /// argument and series as the softplus (with its own division).
    fn ln_1p_unit<const N: usize>(t: &[f64; N]) -> [f64; N] {
        let mut s = [0.0; N];
        let mut offset = [0.0; N];
        for k in 0..N {
            let (numerator, denominator, shift) = atanh_argument(t[k]);
            offset[k] = shift;
            s[k] = numerator / denominator;
        }
        atanh_series(&s, &offset)
    }

    /// Points spread over the range, with the edges of each branch.
    fn grid(lower: f64, upper: f64, count: usize) -> impl Iterator<Item = f64> {
        (0..=count).map(move |k| lower + (upper - lower) * k as f64 / count as f64)
    }

    /// Reference: the standard library's `exp` (the platform libm).
    #[test]
    fn exp_matches_the_standard_library_to_a_few_ulps() {
        for x in grid(-700.0, 0.0, 200_000).chain([-1e-300, -0.5 * LN_2, -LN_2, -708.0, 0.0]) {
            let want = x.max(FLOOR).exp();
            let got = exp(&[x])[0];
            assert!((got - want).abs() <= 4.0 * f64::EPSILON * want, "exp({x}): {got} vs {want}");
        }
        let far = exp(&[-1e6, f64::NEG_INFINITY]);
        assert!(far[0] < 1e-300 && far[1] < 1e-300);
        for x in grid(0.0, 709.0, 200_000).chain([1e-300, 0.5 * LN_2, LN_2, 708.9]) {
            let (want, got) = (x.exp(), exp(&[x])[0]);
            assert!((got - want).abs() <= 4.0 * f64::EPSILON * want, "exp({x}): {got} vs {want}");
        }
        assert_eq!(exp(&[709.5, 1e6, f64::INFINITY]), [f64::INFINITY; 3]);
    }

    /// Reference: the standard library's `ln_1p`.
    #[test]
    fn log_one_plus_matches_the_standard_library_to_a_few_ulps() {
        for t in grid(0.0, 1.0, 200_000).chain([1e-300, 1e-17, 1e-9, SQRT_2 - 1.0, 1.0]) {
            let want = t.ln_1p();
            let got = ln_1p_unit(&[t])[0];
            assert!((got - want).abs() <= 4.0 * f64::EPSILON * want, "ln_1p({t}): {got} vs {want}");
        }
    }

    /// Reference: the definitions log(1 + e^η) and 1 / (1 + e^−η), computed
    /// with the standard library (the family module's own functions).
    #[test]
    fn softplus_and_logistic_match_their_definitions() {
        for eta in grid(-40.0, 40.0, 100_000).chain([-800.0, -700.5, 0.0, 700.5, 800.0]) {
            // Neighbouring lanes hold other values: lanes must not mix.
            let (sp, p) = softplus_and_logistic(&[-eta, eta, 0.5 * eta, 1.0, 1e-3 * eta]);
            let (sp, p) = (sp[1], p[1]);
            let (want_sp, want_p) = (softplus(eta), logistic(eta));
            assert!((sp - want_sp).abs() <= 8.0 * f64::EPSILON * want_sp + 1e-300, "softplus({eta})");
            assert!((p - want_p).abs() <= 8.0 * f64::EPSILON * want_p + 1e-300, "logistic({eta})");
        }
    }
}
