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
//! * `log x` (for the beta family's gammas): `x = 2ᵉ·m` with m in
//!   [√½, √2) read from the bits, then `e·ln 2 + 2·atanh(s)` with
//!   `s = (m − 1)/(m + 1)`, |s| ≤ 0.1716 — the same series as `log(1 + t)`.
//! * `log Γ(x)` and `ψ(x)` together: the recurrence
//!   `Γ(x + 10) = Γ(x)·x(x + 1)…(x + 9)` carries x to `z = x + 10`, where
//!   Stirling's series with the Bernoulli numbers to B₁₄ is exact to about
//!   1e-17 (the first term left out, `B₁₆/(16·15·z¹⁵)`, is below 3e-17;
//!   for ψ, `B₁₆/(16·z¹⁶)` below 5e-17; Abramowitz & Stegun 6.1.40 and
//!   6.3.18, recalled); the product `P` and its derivative `P′` come from
//!   one pass, so `log Γ(x) = log Γ(z) − log P` and `ψ(x) = ψ(z) − P′/P`
//!   take one logarithm and one division more. Above 10¹⁵ no shift is
//!   needed (or safe: P would overflow), and arguments below 10⁻³⁰⁰ are
//!   read as 10⁻³⁰⁰ (`log Γ` there is about 691, a density so low that no
//!   sampler step stays).
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

/// `log x` of every positive normal value (module doc).
#[inline(always)]
pub fn ln<const N: usize>(x: &[f64; N]) -> [f64; N] {
    let mut s = [0.0; N];
    let mut offset = [0.0; N];
    for k in 0..N {
        let bits = x[k].to_bits();
        // The biased exponent, written into the low bits of ROUNDER.
        let exponent = f64::from_bits(ROUNDER.to_bits() | (bits >> 52)) - ROUNDER - 1023.0;
        let mantissa = f64::from_bits((bits & 0x000f_ffff_ffff_ffff) | 0x3ff0_0000_0000_0000);
        let high = mantissa > SQRT_2;
        let m = if high { 0.5 * mantissa } else { mantissa };
        let e = if high { exponent + 1.0 } else { exponent };
        s[k] = (m - 1.0) / (m + 1.0);
        offset[k] = e.mul_add(LN2_HI, e * LN2_LO);
    }
    atanh_series(&s, &offset)
}

/// How far the recurrence carries an argument before Stirling's series.
const GAMMA_SHIFT: usize = 10;
/// Above this an argument needs no shift (module doc).
const GAMMA_LARGE: f64 = 1e15;
/// Below this an argument is read as this (module doc).
const GAMMA_SMALL: f64 = 1e-300;
/// ½·log(2π).
const HALF_LN_TWO_PI: f64 = 0.918_938_533_204_672_7;
/// Stirling's series for log Γ(z) − ((z − ½)·log z − z + ½·log 2π), in
/// 1/z times powers of 1/z²: B₂ₙ/(2n(2n − 1)) for n = 7 down to 1.
const LN_GAMMA_TERMS: [f64; 7] =
    [1.0 / 156.0, -691.0 / 360_360.0, 1.0 / 1188.0, -1.0 / 1680.0, 1.0 / 1260.0, -1.0 / 360.0, 1.0 / 12.0];
/// The series of ψ(z) − (log z − 1/(2z)), in powers of 1/z²: −B₂ₙ/(2n)
/// for n = 7 down to 1.
const DIGAMMA_TERMS: [f64; 7] =
    [-1.0 / 12.0, 691.0 / 32_760.0, -1.0 / 132.0, 1.0 / 240.0, -1.0 / 252.0, 1.0 / 120.0, -1.0 / 12.0];

/// `(log Γ(x), ψ(x))` of every positive value (module doc).
#[inline(always)]
pub fn ln_gamma_and_digamma<const N: usize>(x: &[f64; N]) -> ([f64; N], [f64; N]) {
    let (mut z, mut product, mut derivative) = ([0.0; N], [0.0; N], [0.0; N]);
    for k in 0..N {
        let v = x[k].max(GAMMA_SMALL);
        let shift = v < GAMMA_LARGE;
        let (mut p, mut dp) = (v, 1.0_f64);
        for i in 1..GAMMA_SHIFT {
            let vi = v + i as f64;
            dp = dp.mul_add(vi, p);
            p *= vi;
        }
        product[k] = if shift { p } else { 1.0 };
        derivative[k] = if shift { dp } else { 0.0 };
        z[k] = if shift { v + GAMMA_SHIFT as f64 } else { v };
    }
    let ln_z = ln(&z);
    let ln_product = ln(&product);
    let (mut ln_gamma, mut digamma) = ([0.0; N], [0.0; N]);
    for k in 0..N {
        let inverse = 1.0 / z[k];
        let inverse2 = inverse * inverse;
        let (mut a, mut b) = (0.0_f64, 0.0_f64);
        for j in 0..LN_GAMMA_TERMS.len() {
            a = a.mul_add(inverse2, LN_GAMMA_TERMS[j]);
            b = b.mul_add(inverse2, DIGAMMA_TERMS[j]);
        }
        let stirling = (z[k] - 0.5).mul_add(ln_z[k], HALF_LN_TWO_PI - z[k]);
        ln_gamma[k] = a.mul_add(inverse, stirling) - ln_product[k];
        let ratio = derivative[k] / product[k];
        digamma[k] = b.mul_add(inverse2, (-0.5f64).mul_add(inverse, ln_z[k])) - ratio;
    }
    (ln_gamma, digamma)
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

    /// Reference: the standard library's `ln`, over twenty decades and at
    /// the branch edge √2.
    #[test]
    fn log_matches_the_standard_library_to_a_few_ulps() {
        for x in grid(-300.0, 300.0, 100_000).map(|e| 10f64.powf(e)).chain([1.0, SQRT_2, SQRT_2 * (1.0 + 1e-15), 0.5, 2.0, f64::MIN_POSITIVE]) {
            let (want, got) = (x.ln(), ln(&[2.0, x, 0.3])[1]);
            assert!((got - want).abs() <= 4.0 * f64::EPSILON * want.abs().max(1e-300) + 1e-300, "ln({x}): {got} vs {want}");
        }
    }

    /// Reference: closed forms — `log Γ(½) = ½·log π`, `log Γ(1) = log Γ(2)
    /// = 0`, `ψ(1) = −γ`, `ψ(½) = −γ − 2·log 2` (Abramowitz & Stegun 6.1.8,
    /// 6.3.2, 6.3.3, recalled) — and statrs' Lanczos `ln_gamma` and its
    /// `digamma` from 10⁻⁸ to 10¹⁸.
    #[test]
    fn log_gamma_and_digamma_match_closed_forms_and_statrs() {
        use statrs::function::gamma::{digamma, ln_gamma};
        const EULER: f64 = 0.577_215_664_901_532_9;
        let (lg, dg) = ln_gamma_and_digamma(&[0.5, 1.0, 2.0, 7.25]);
        assert!((lg[0] - 0.5 * std::f64::consts::PI.ln()).abs() < 1e-14, "{}", lg[0]);
        assert!(lg[1].abs() < 1e-14 && lg[2].abs() < 1e-14, "{lg:?}");
        assert!((dg[1] + EULER).abs() < 1e-14, "{}", dg[1]);
        assert!((dg[0] + EULER + 2.0 * LN_2).abs() < 1e-14, "{}", dg[0]);
        for x in grid(-8.0, 18.0, 20_000).map(|e| 10f64.powf(e)) {
            let (lg, dg) = ln_gamma_and_digamma(&[3.0, x]);
            let (want_lg, want_dg) = (ln_gamma(x), digamma(x));
            assert!((lg[1] - want_lg).abs() <= 1e-13 * want_lg.abs().max(1.0), "log Γ({x}): {} vs {want_lg}", lg[1]);
            assert!((dg[1] - want_dg).abs() <= 1e-13 * want_dg.abs().max(1.0), "ψ({x}): {} vs {want_dg}", dg[1]);
        }
    }
}
