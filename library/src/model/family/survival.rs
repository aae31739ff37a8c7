//! Positive times, some of them cut short: the exponential and Weibull
//! families.
//!
//! A time family's outcome is a positive time to an event (days to
//! germination, months to relapse). A row whose follow-up ended before the
//! event happened — the column named after `cut short by` is yes (or 1)
//! there — still says something: the event came later than its time. Such a
//! row adds the log of the survival function `S(y) = P(T > y)` to the
//! likelihood in place of the log density.
//!
//! **Link.** Both families put the log link on the *mean* time: `E[T] = e^η`.
//! So the intercept is the log of a mean time, a coefficient is the log of
//! the ratio of two mean times, and contrasts on means are differences of
//! mean times (the machinery of the other log-link families serves them
//! unchanged). With the shape held, every quantile of a Weibull time moves
//! by the same ratio as its mean, so a coefficient is also the log ratio of
//! median times.
//!
//! **Weibull.** Shape `k > 0` (learned, label `shape`) and scale
//! `λ = e^η / Γ(1 + 1/k)`, the scale whose mean is `e^η`
//! (`E[T] = λ·Γ(1 + 1/k)`; Johnson, Kotz & Balakrishnan, *Continuous
//! Univariate Distributions* vol. 1, 2nd ed., 1994, ch. 21; recalled).
//! With `z = k·(log y − log λ)` and `w = e^z = (y/λ)^k`:
//!
//! `log f(y) = log k − log y + z − w`, `log S(y) = −w`.
//!
//! A row with event indicator `δ` (1 for an observed event, 0 for a row cut
//! short) keeps `δ·(log k + z) − w`; the likelihood's constant is
//! `−Σ δ·log y`. The exponential family is the case `k = 1` (`λ = e^η`, the
//! hazard constant at `e^−η`), without a shape parameter.
//!
//! **Derivatives.** In η (`dz/dη = −k`): `k·(w − δ)`. The sampler sees
//! `u = log k`; with `g(k) = log Γ(1 + 1/k)`, `z = k·(log y − η + g(k))`
//! and `k·g′(k) = −ψ(1 + 1/k)/k`, so `k·dz/dk = z − ψ(1 + 1/k)` and the row's
//! derivative in u is `δ + (δ − w)·(z − ψ(1 + 1/k))`.
//!
//! **Why the mean and not the scale.** On the scale λ the intercept would
//! change its meaning whenever the shape moved; on the mean it keeps it,
//! the posterior of the intercept and the shape is less tilted, and the
//! default coefficient priors from the log-link budget (`model::defaults`)
//! mean the same as for counts: ratios of means.

use rand::{Rng, RngExt};
use statrs::function::gamma::{digamma, ln_gamma};

use super::super::error::ModelError;

/// The word of the exponential family.
pub const EXPONENTIAL: &str = "exponential";
/// The word of the Weibull family.
pub const WEIBULL: &str = "weibull";
/// The label of the Weibull family's shape.
pub const SHAPE: &str = "shape";
/// The words between a time family and its censoring column: the rows where
/// that column is yes (1) had their follow-up *cut short by* its end,
/// before the event.
pub const CUT_SHORT_BY: [&str; 3] = ["cut", "short", "by"];
/// The words before the column of each row's upper bound: the event *came
/// by* that time, after the row's outcome time (module doc, "Times known
/// to lie between two bounds").
pub const CAME_BY: [&str; 2] = ["came", "by"];

/// The columns a time family's line names beside the outcome.
#[derive(Debug, Clone, PartialEq, Eq, Default)]
pub struct TimeColumns {
    /// `cut short by C`: yes where the follow-up ended before the event.
    pub cut_short: Option<String>,
    /// `came by U`: each row's event came after its outcome time and by U.
    pub came_by: Option<String>,
}

/// The distribution of a positive time.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum TimeForm {
    /// Constant hazard, no parameter beside the coefficients.
    Exponential,
    /// Hazard rising (shape > 1) or falling (shape < 1) with time.
    Weibull,
}

impl TimeForm {
    /// The family word.
    pub fn word(self) -> &'static str {
        match self {
            TimeForm::Exponential => EXPONENTIAL,
            TimeForm::Weibull => WEIBULL,
        }
    }

    /// The form a family word names.
    pub fn from_word(word: &str) -> Option<TimeForm> {
        match word {
            EXPONENTIAL => Some(TimeForm::Exponential),
            WEIBULL => Some(TimeForm::Weibull),
            _ => None,
        }
    }
}

/// Read `exponential` or `weibull`, optionally followed by
/// `cut short by <column>` and `came by <column>`, in either order (the
/// words of a `family` line after `family`); `None` when the first word is
/// neither.
pub fn parse_time_family(words: &[&str]) -> Option<Result<(TimeForm, TimeColumns), ModelError>> {
    let form = TimeForm::from_word(words.first()?)?;
    let mut columns = TimeColumns::default();
    let mut rest = &words[1..];
    let wrong = || {
        Err(ModelError::syntax(format!(
            "`family {}`: after `{}` write nothing, `cut short by <column>` naming a yes/no column that is yes \
             where the follow-up ended before the event, and/or `came by <column>` naming each row's time by \
             which the event had come (the outcome then the last time it had not), each once",
            words.join(" "),
            form.word()
        )))
    };
    while !rest.is_empty() {
        rest = match rest {
            [c, s, b, column, tail @ ..] if [*c, *s, *b] == CUT_SHORT_BY && columns.cut_short.is_none() => {
                columns.cut_short = Some(column.to_string());
                tail
            }
            [c, b, column, tail @ ..] if [*c, *b] == CAME_BY && columns.came_by.is_none() => {
                columns.came_by = Some(column.to_string());
                tail
            }
            _ => return Some(wrong()),
        };
    }
    Some(Ok((form, columns)))
}

/// One fitted row as the likelihood keeps it: the log of its time, its
/// event indicator (1 seen at that time, 0 otherwise) and the log of the
/// time by which its event came (infinite when the row has no upper bound:
/// an event seen at its time, or a row cut short). A row between bounds has
/// `event` 0, its lower bound as `log_time` (−∞ for a lower bound of 0) and
/// a finite `log_upper`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TimeRow {
    pub log_time: f64,
    pub event: f64,
    pub log_upper: f64,
}

impl TimeRow {
    /// From a positive time and whether its follow-up was cut short.
    pub fn new(time: f64, cut_short: bool) -> TimeRow {
        TimeRow { log_time: time.ln(), event: if cut_short { 0.0 } else { 1.0 }, log_upper: f64::INFINITY }
    }

    /// A row whose event came after `lower` (0 or more) and by `upper`
    /// (checked above `lower` when the column is read); equal bounds are an
    /// event seen at that time.
    pub fn between(lower: f64, upper: f64) -> TimeRow {
        if lower == upper {
            return TimeRow::new(lower, false);
        }
        TimeRow { log_time: lower.ln(), event: 0.0, log_upper: upper.ln() }
    }

    /// `δ·log y`, the part of a seen event's log density that does not
    /// depend on the parameters; 0 for every other row (whose `log y` may
    /// be −∞, a lower bound of 0).
    pub fn log_time_of_event(&self) -> f64 {
        if self.event == 1.0 {
            self.log_time
        } else {
            0.0
        }
    }

    /// Whether the row's event is known to have come (seen, or between
    /// bounds), not cut short.
    pub fn had_event(&self) -> bool {
        self.event == 1.0 || self.log_upper.is_finite()
    }

    /// A time standing for the row in the default priors' mean: its time,
    /// or the middle of its bounds.
    pub fn typical_time(&self) -> f64 {
        if self.log_upper.is_finite() {
            (self.log_time.exp() + self.log_upper.exp()) / 2.0
        } else {
            self.log_time.exp()
        }
    }
}

/// The Weibull shape `k = e^u` with what each row needs of it, computed
/// once per evaluation: `log k`, `log Γ(1 + 1/k)` and `ψ(1 + 1/k)`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TimeShape {
    pub k: f64,
    pub log_k: f64,
    pub log_gamma: f64,
    pub digamma: f64,
}

impl TimeShape {
    /// From `u = log k`.
    pub fn from_log_shape(u: f64) -> TimeShape {
        let k = u.exp();
        TimeShape { k, log_k: u, log_gamma: ln_gamma(1.0 + 1.0 / k), digamma: digamma(1.0 + 1.0 / k) }
    }

    /// The exponential family's shape, 1 (`Γ(2) = 1`).
    pub fn exponential() -> TimeShape {
        TimeShape { k: 1.0, log_k: 0.0, log_gamma: 0.0, digamma: digamma(2.0) }
    }

    /// The log of the scale λ whose mean is `e^eta`.
    pub fn log_scale(&self, eta: f64) -> f64 {
        eta - self.log_gamma
    }
}

/// One row's log density (event) or log survival (cut short) without
/// `−δ·log y`, and its derivatives in η and in `u = log k` (module doc);
/// a row between bounds the log of the chance between them
/// ([`interval_row`]).
pub fn time_row(row: TimeRow, eta: f64, shape: TimeShape) -> (f64, f64, f64) {
    if row.log_upper.is_finite() {
        return interval_row(row, eta, shape);
    }
    let z = shape.k * (row.log_time - shape.log_scale(eta));
    let w = z.exp();
    let term = row.event * (shape.log_k + z) - w;
    let d_eta = shape.k * (w - row.event);
    let d_u = row.event + (row.event - w) * (z - shape.digamma);
    (term, d_eta, d_u)
}

/// `log(1 − e^(−d))` for `d > 0`, by the branch that keeps its digits
/// (Mächler 2012, "Accurately computing log(1 − exp(−|a|))", the CRAN
/// Rmpfr vignette; recalled): `log(−expm1(−d))` for d up to ln 2,
/// `ln_1p(−e^(−d))` above.
fn log_one_minus_exp(d: f64) -> f64 {
    if d <= std::f64::consts::LN_2 {
        (-(-d).exp_m1()).ln()
    } else {
        (-(-d).exp()).ln_1p()
    }
}

/// A row whose event came between its bounds l < u: `log(S(l) − S(u))`,
/// written as `−w_l + log(1 − e^(−(w_u − w_l)))` with `w = (t/λ)^k`, so
/// neither a narrow interval nor a late one loses the difference (`w_l = 0`
/// for a lower bound of 0: `log F(u)`). With `d = w_u − w_l` and
/// `r = 1/(e^d − 1)`, `dw/dη = −k·w` and `dw/du = w·(z − ψ(1 + 1/k))`:
/// the derivative in η is `k·(w_l − r·d)` and in u
/// `−w_l·(z_l − ψ) + r·(w_u·(z_u − ψ) − w_l·(z_l − ψ))`.
fn interval_row(row: TimeRow, eta: f64, shape: TimeShape) -> (f64, f64, f64) {
    let log_scale = shape.log_scale(eta);
    let z_u = shape.k * (row.log_upper - log_scale);
    let w_u = z_u.exp();
    let (w_l, slope_l) = if row.log_time == f64::NEG_INFINITY {
        (0.0, 0.0)
    } else {
        let z_l = shape.k * (row.log_time - log_scale);
        let w_l = z_l.exp();
        (w_l, w_l * (z_l - shape.digamma))
    };
    let d = w_u - w_l;
    let r = 1.0 / d.exp_m1();
    let term = -w_l + log_one_minus_exp(d);
    let d_eta = shape.k * (w_l - r * d);
    let d_u = -slope_l + r * (w_u * (z_u - shape.digamma) - slope_l);
    (term, d_eta, d_u)
}

/// The full log density (event) or log survival (cut short) of one row,
/// every constant kept: what `score predictions` compares.
pub fn time_row_log_density(row: TimeRow, eta: f64, shape: TimeShape) -> f64 {
    time_row(row, eta, shape).0 - row.log_time_of_event()
}

/// A time drawn with mean `e^eta` and shape `k`: `λ·(−log U)^(1/k)` for U
/// uniform on (0, 1], the inverse of the survival function.
pub fn draw_time<R: Rng + ?Sized>(eta: f64, shape: TimeShape, rng: &mut R) -> f64 {
    let u: f64 = 1.0 - rng.random::<f64>();
    shape.log_scale(eta).exp() * (-u.ln()).powf(1.0 / shape.k)
}

/// The median time of a row with mean `e^eta` and shape `k`:
/// `λ·(ln 2)^(1/k)`, where the survival function `exp(−(t/λ)^k)` is one
/// half (the exponential's `λ·ln 2` at k = 1).
pub fn median_time(eta: f64, shape: TimeShape) -> f64 {
    (shape.log_scale(eta) + std::f64::consts::LN_2.ln() / shape.k).exp()
}

/// The time by which a share `q` (strictly between 0 and 1) of the events
/// has come: `λ·(−log(1 − q))^(1/k)`, the inverse of `1 − S(t)`, with
/// `log(1 − q)` taken as `ln_1p(−q)` so a small q keeps its digits.
pub fn quantile_time(q: f64, eta: f64, shape: TimeShape) -> f64 {
    (shape.log_scale(eta) + (-(-q).ln_1p()).ln() / shape.k).exp()
}

/// `w = (t/λ)^k`, the cumulative hazard at time `t > 0`.
fn cumulative_hazard(t: f64, eta: f64, shape: TimeShape) -> f64 {
    (shape.k * (t.ln() - shape.log_scale(eta))).exp()
}

/// The chance that the event has come by time `t`: `1 − exp(−(t/λ)^k)`,
/// written as `−expm1(−w)` so that a small chance keeps its digits.
pub fn event_chance_by(t: f64, eta: f64, shape: TimeShape) -> f64 {
    -(-cumulative_hazard(t, eta, shape)).exp_m1()
}

/// The log of the survival function at time `t`, `−(t/λ)^k`.
pub fn log_survival(t: f64, eta: f64, shape: TimeShape) -> f64 {
    -cumulative_hazard(t, eta, shape)
}

/// The hazard at time `t > 0`: `(k/t)·(t/λ)^k`, the density over the
/// survival function (infinite at 0 when k < 1).
pub fn hazard(t: f64, eta: f64, shape: TimeShape) -> f64 {
    shape.k / t * cumulative_hazard(t, eta, shape)
}

/// Each row's time, cut at its follow-up limit (`None`: followed until the
/// event), with whether it was cut.
pub fn cut_at_follow_up(times: &[f64], limits: &[Option<f64>]) -> (Vec<f64>, Vec<bool>) {
    times
        .iter()
        .zip(limits)
        .map(|(&t, limit)| match limit {
            Some(c) if t > *c => (*c, true),
            _ => (t, false),
        })
        .unzip()
}

/// What a time model assumes, and how many rows were cut short (`flags`:
/// per row, whether it was) or known between bounds (`rows`, with the
/// `came by` column).
pub fn time_notes(form: TimeForm, cut_short: Option<&str>, flags: Option<&[bool]>, came_by: Option<(&str, &[TimeRow])>) -> Vec<String> {
    let mut notes = vec![match form {
        TimeForm::Exponential => "each time is exponential around its mean e^η (a hazard constant in time)".to_string(),
        TimeForm::Weibull => "each time is Weibull around its mean e^η with the shape k (hazard rising with time for \
                              k > 1, falling for k < 1), sampled as log(shape) with the Jacobian of that change included"
            .to_string(),
    }];
    if let (Some(column), Some(flags)) = (cut_short, flags) {
        let cut = flags.iter().filter(|&&c| c).count();
        notes.push(format!(
            "{cut} of {} rows were cut short (`{column}` yes): each adds the chance that its event came later than \
             its time, not a density; the follow-up's end is taken to say nothing about when the event would come",
            flags.len()
        ));
    }
    if let Some((column, rows)) = came_by {
        let between = rows.iter().filter(|r| r.log_upper.is_finite()).collect::<Vec<_>>();
        let from_zero = between.iter().filter(|r| r.log_time == f64::NEG_INFINITY).count();
        notes.push(format!(
            "{} of {} rows had their event between their time and `{column}` ({from_zero} of them from 0: the event \
             came before `{column}`, when exactly unknown); each adds the chance of an event between its bounds, \
             log(S(lower) − S(upper)); rows whose bounds are equal are events seen at that time",
            between.len(),
            rows.len()
        ));
    }
    notes
}

/// The mean time of the data with rows cut short counted as they should
/// be: total time followed over the number of events (the exponential
/// family's maximum-likelihood mean without predictors; Cox & Oakes,
/// *Analysis of Survival Data*, 1984, §3.2; recalled), falling back to the
/// plain mean when no row had its event.
pub fn mean_time(rows: &[TimeRow]) -> f64 {
    let total: f64 = rows.iter().map(TimeRow::typical_time).sum();
    let events: f64 = rows.iter().filter(|r| r.had_event()).count() as f64;
    total / if events > 0.0 { events } else { rows.len().max(1) as f64 }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Source: the Weibull density and survival function written from
    /// their textbook forms (Johnson, Kotz & Balakrishnan 1994, ch. 21;
    /// recalled) with the scale `λ = e^η/Γ(1 + 1/k)` computed directly:
    /// `log f = log k − k log λ + (k − 1) log y − (y/λ)^k`,
    /// `log S = −(y/λ)^k`; derivatives against central differences.
    #[test]
    fn row_matches_the_plain_definition_and_its_differences() {
        let plain = |y: f64, event: bool, eta: f64, u: f64| {
            let k = u.exp();
            let lambda = eta.exp() / ln_gamma(1.0 + 1.0 / k).exp();
            let w = (y / lambda).powf(k);
            if event { k.ln() - k * lambda.ln() + (k - 1.0) * y.ln() - w } else { -w }
        };
        for &(y, event, eta, u) in &[(2.0, true, 0.5, 0.3), (0.05, true, 1.0, -0.7), (30.0, false, 2.5, 0.9), (1.3, false, -0.4, -1.2), (9.0, true, 2.0, 1.6)] {
            let row = TimeRow::new(y, !event);
            let (_, d_eta, d_u) = time_row(row, eta, TimeShape::from_log_shape(u));
            let full = time_row_log_density(row, eta, TimeShape::from_log_shape(u));
            let want = plain(y, event, eta, u);
            assert!((full - want).abs() < 1e-10 * (1.0 + want.abs()), "y {y}: {full} vs {want}");
            let h = 1e-6;
            let fd_eta = (plain(y, event, eta + h, u) - plain(y, event, eta - h, u)) / (2.0 * h);
            let fd_u = (plain(y, event, eta, u + h) - plain(y, event, eta, u - h)) / (2.0 * h);
            assert!((d_eta - fd_eta).abs() < 1e-6 * (1.0 + fd_eta.abs()), "y {y}: d_eta {d_eta} vs {fd_eta}");
            assert!((d_u - fd_u).abs() < 1e-6 * (1.0 + fd_u.abs()), "y {y}: d_u {d_u} vs {fd_u}");
        }
    }

    /// Source: the chance of a Weibull time between l and u is
    /// `S(l) − S(u)` with `S(t) = exp(−(t/λ)^k)` (JKB 1994, ch. 21;
    /// recalled), computed here plainly; derivatives against central
    /// differences of that plain form, including a lower bound of 0 and a
    /// narrow interval late in the tail, where the plain form still has
    /// digits enough at these values.
    #[test]
    fn a_row_between_bounds_is_the_log_difference_of_survival() {
        let plain = |l: f64, u: f64, eta: f64, uu: f64| {
            let k = uu.exp();
            let lambda = eta.exp() / ln_gamma(1.0 + 1.0 / k).exp();
            let s = |t: f64| (-(t / lambda).powf(k)).exp();
            (s(l) - s(u)).ln()
        };
        for &(l, u, eta, uu) in &[(2.0, 5.0, 1.2, 0.3), (0.0, 3.0, 1.0, -0.6), (9.0, 9.5, 1.5, 0.8), (0.0, 0.4, 2.0, 1.1), (14.0, 30.0, 2.5, -0.2)] {
            let row = TimeRow::between(l, u);
            let (term, d_eta, d_u) = time_row(row, eta, TimeShape::from_log_shape(uu));
            let want = plain(l, u, eta, uu);
            assert!((term - want).abs() < 1e-9 * (1.0 + want.abs()), "({l}, {u}): {term} vs {want}");
            assert_eq!(time_row_log_density(row, eta, TimeShape::from_log_shape(uu)), term);
            let h = 1e-6;
            let fd_eta = (plain(l, u, eta + h, uu) - plain(l, u, eta - h, uu)) / (2.0 * h);
            let fd_u = (plain(l, u, eta, uu + h) - plain(l, u, eta, uu - h)) / (2.0 * h);
            assert!((d_eta - fd_eta).abs() < 1e-6 * (1.0 + fd_eta.abs()), "({l}, {u}): d_eta {d_eta} vs {fd_eta}");
            assert!((d_u - fd_u).abs() < 1e-6 * (1.0 + fd_u.abs()), "({l}, {u}): d_u {d_u} vs {fd_u}");
        }
        // equal bounds: an event seen at that time
        assert_eq!(TimeRow::between(4.0, 4.0), TimeRow::new(4.0, false));
    }

    /// Far in the tail `S(l) − S(u)` underflows in the plain form; the
    /// log-difference form keeps it: `−w_l + log(1 − e^(−d))` ≈ `−w_l`
    /// for a wide gap, checked against `−(l/λ)^k` written directly.
    #[test]
    fn a_late_interval_keeps_its_log_chance() {
        let shape = TimeShape::from_log_shape(0.5);
        let (term, d_eta, _) = time_row(TimeRow::between(400.0, 800.0), 1.0, shape);
        let lambda = (1.0 - shape.log_gamma).exp();
        let w_l = (400.0 / lambda).powf(shape.k);
        assert!(term.is_finite() && (term + w_l).abs() < 1e-9 * w_l, "{term} vs {}", -w_l);
        assert!(d_eta.is_finite());
    }

    /// Source: the exponential density `e^−η·exp(−y·e^−η)` and survival
    /// `exp(−y·e^−η)` (mean e^η).
    #[test]
    fn shape_one_is_the_exponential() {
        for &(y, eta) in &[(0.3, 0.0f64), (12.0, 2.2), (4.0, -1.0)] {
            let rate = (-eta).exp();
            let event = time_row_log_density(TimeRow::new(y, false), eta, TimeShape::exponential());
            assert!((event - (rate.ln() - y * rate)).abs() < 1e-12);
            let cut = time_row_log_density(TimeRow::new(y, true), eta, TimeShape::exponential());
            assert!((cut + y * rate).abs() < 1e-12);
        }
    }

    /// Source: the mean of a Weibull time is `λ Γ(1 + 1/k)` (JKB 1994;
    /// recalled): the drawn times' average is within 4 standard errors
    /// of `e^η`, with the sd from `λ²Γ(1 + 2/k) − mean²`.
    #[test]
    fn drawn_times_have_the_mean_of_the_link() {
        use rand::SeedableRng;
        let mut rng = rand::rngs::StdRng::seed_from_u64(7);
        for &(eta, u) in &[(1.0f64, 0.5f64), (0.2, -0.4), (2.0, 0.0)] {
            let shape = TimeShape::from_log_shape(u);
            let n = 40_000;
            let mean = (0..n).map(|_| draw_time(eta, shape, &mut rng)).sum::<f64>() / n as f64;
            let lambda = shape.log_scale(eta).exp();
            let sd = (lambda * lambda * ln_gamma(1.0 + 2.0 / shape.k).exp() - eta.exp().powi(2)).sqrt();
            assert!((mean - eta.exp()).abs() < 4.0 * sd / (n as f64).sqrt(), "eta {eta}: {mean}");
        }
    }

    #[test]
    fn the_family_line_names_its_censoring_column() {
        assert_eq!(parse_time_family(&["weibull"]).unwrap().unwrap(), (TimeForm::Weibull, TimeColumns::default()));
        assert_eq!(
            parse_time_family(&["exponential", "cut", "short", "by", "lost"]).unwrap().unwrap(),
            (TimeForm::Exponential, TimeColumns { cut_short: Some("lost".into()), came_by: None })
        );
        let wrong = parse_time_family(&["weibull", "cut", "by", "lost"]).unwrap().unwrap_err().to_string();
        assert!(wrong.contains("cut short by <column>"), "{wrong}");
        let both = parse_time_family(&["weibull", "came", "by", "seen", "cut", "short", "by", "lost"]).unwrap().unwrap();
        assert_eq!(both.1, TimeColumns { cut_short: Some("lost".into()), came_by: Some("seen".into()) });
        assert!(parse_time_family(&["weibull", "came", "by", "a", "came", "by", "b"]).unwrap().is_err());
        assert!(parse_time_family(&["poisson"]).is_none());
    }
}
