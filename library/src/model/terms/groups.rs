//! Pooled groups: the layout of a `pooled <category>` term.
//!
//! Clustered rows (trees in orchard blocks, patients in clinics) share
//! something the predictors do not name. A pooled group gives every level of
//! its category a *departure* from the population's prediction on the link
//! scale, and treats the departures as draws from `normal(0, spread)` whose
//! spread is learned from the data: a level with many rows keeps close to
//! its own rows, one with few is pulled towards the population (partial
//! pooling). The departures are not design columns; they enter the linear
//! predictor as a contribution of their own (`model::family::pooling`), so
//! the fixed-effect design and its priors are untouched.
//!
//! This module plans a group once on the fitted data — its levels in the
//! table's order, the rows per level, how its departures are sampled — and
//! maps the rows of any table to level indices. Labels are written by
//! [`super::design`] (`block spread`, `block departure[B1]`).
//!
//! # Nested groups
//!
//! Plots within sites are often labelled per site (`p1`, `p2`, … again in
//! every site), so a plot is the pair of its own label and its site's.
//! `pooled plot within site` plans the group on those pairs: one level per
//! pair present in the fitted rows, ordered by the outer category's levels
//! and then the inner one's, each shown as `p1 in A` ([`nested_level`]).
//! Nothing else changes: the pairs are levels like any other, so the
//! density, the sampling choice and the predictions need no case of their
//! own. A row belongs to a fitted plot only when both its labels match one
//! pair; a table without either column holds new plots.
//!
//! # Centred or non-centred
//!
//! The departures can be sampled as themselves (*centred*) or as standard
//! scores times the spread (*non-centred*). When each level's rows say
//! little about its departure the posterior of (spread, departures) is a
//! funnel that the centred form samples badly (divergences); when they say
//! a lot, the non-centred form is the awkward one. Waypath's rule, from the
//! data before fitting:
//!
//! 1. `I`, the information one row carries about the linear predictor at
//!    the outcome's mean: `1/s_y²` normal, `p(1 − p)` bernoulli,
//!    `m̄·p(1 − p)` binomial, the mean count poisson.
//! 2. A rough spread of the departures from the raw level means on the link
//!    scale `mⱼ` (levels with rows only): the moment estimate
//!    `τ̂² = var(mⱼ) − mean(1/(nⱼ·I))` — the spread of the level means less
//!    what their own noise explains (0 when that is negative, or with fewer
//!    than 3 levels with rows).
//! 3. A level's *information ratio* `nⱼ·I·τ̂²`: how much more its rows tell
//!    about its departure than the population does.
//!
//! The group is centred when the median level's ratio is at least
//! [`CENTRED_AT`], non-centred otherwise — so a group whose levels hardly
//! differ (a spread near 0, the funnel's neck) is non-centred whatever its
//! size.
//!
//! **Varying slopes** have a ratio each, from the same reasoning: what a
//! level's rows say about its slope grows with their number and with the
//! spread of the slope's column among them, `I·Sₓₓ,ⱼ` (`Sₓₓ,ⱼ` the sum of
//! squared deviations of the column within level `j`), and a rough spread
//! of the slope departures comes from the levels' own slopes `bⱼ` (least
//! squares of the outcome per trial on the column within the level,
//! carried to the link scale by the link's derivative at the outcome's
//! mean): `τ̂ₓ² = var(bⱼ) − mean(1/(I·Sₓₓ,ⱼ))`. Level `j`'s ratio is
//! `I·Sₓₓ,ⱼ·τ̂ₓ²`. When the intercept is centred, the slopes (as written)
//! are centred too up to the first whose median ratio is below
//! [`SLOPE_CENTRED_AT`], and that one and the rest non-centred
//! ([`GroupLayout::CentredFirst`]; the density's form in
//! `model::family::correlated`): a slope whose levels' rows tell less
//! about it than the population does is the funnel's neck for that slope
//! even when the intercepts are well pinned. The bar is lower than the
//! intercept's because `I` here comes from the outcome's whole spread,
//! which the other predictors and the intercepts' departures inflate, so
//! a slope's ratio runs low; a slope between the two bars stays centred
//! (a slope of 60 sites with a ratio near 2 sampled non-centred mixed far
//! worse than centred in the MixedLM reference check).
//!
//! The predictors are not taken out of the level means or slopes, so the
//! rule is a guide; a `parameterise` line overrides it, and the model's
//! notes say which form was taken and why.

use std::collections::HashMap;

use crate::table::Table;

use super::super::columns::{category_levels, find_column};
use super::super::error::ModelError;
use super::super::prior::short_number;

/// The median information ratio at and above which a group is centred.
pub const CENTRED_AT: f64 = 5.0;

/// The median information ratio below which a varying slope (and every
/// slope after it) is non-centred in a group whose intercept is centred.
pub const SLOPE_CENTRED_AT: f64 = 1.0;

/// How a pooled group's departures are sampled.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum GroupLayout {
    /// The departures themselves, with `normal(0, spread)` as their prior.
    Centred,
    /// Standard scores `z` with `departure = spread · z`.
    NonCentred,
    /// A group with varying slopes whose first `n` effects (the intercept,
    /// then slopes in the order written) are centred and the rest
    /// non-centred; chosen from the data, or by `parameterise c centred n`.
    CentredFirst(usize),
}

impl GroupLayout {
    /// The word of a `parameterise` line (`partly centred` for a layout
    /// that no line can ask for).
    pub fn word(self) -> &'static str {
        match self {
            GroupLayout::Centred => "centred",
            GroupLayout::NonCentred => "noncentred",
            GroupLayout::CentredFirst(_) => "partly centred",
        }
    }

    /// How many of a group's `effects` (intercept and slopes) are centred.
    pub fn centred_effects(self, effects: usize) -> usize {
        match self {
            GroupLayout::Centred => effects,
            GroupLayout::NonCentred => 0,
            GroupLayout::CentredFirst(n) => n.min(effects),
        }
    }

    /// Read the word of a `parameterise` line.
    pub fn parse(word: &str) -> Option<GroupLayout> {
        [GroupLayout::Centred, GroupLayout::NonCentred].into_iter().find(|l| l.word() == word)
    }

    /// The words a `parameterise` line takes after the category.
    pub const WORDS: [&'static str; 2] = ["centred", "noncentred"];
}

/// Why a group has its layout.
#[derive(Debug, Clone, PartialEq)]
pub enum LayoutChoice {
    /// Written in the cell.
    Declared,
    /// Waypath's rule, with the median information ratio it saw and the
    /// rough spread of the departures behind it, for the intercept and
    /// then each varying slope.
    FromData { median_ratio: f64, rough_spread: f64, slopes: Vec<(f64, f64)> },
}

/// What the fitted rows say about a varying slope, level by level: the
/// spread of the slope's design column within the level (`Sₓₓ`, the sum of
/// squared deviations from the level's mean) and the level's own rough
/// slope on the link scale (`None` for a level with fewer than 2 rows or
/// no spread in the column).
#[derive(Debug, Clone, PartialEq)]
pub struct SlopeEvidence {
    pub spread_sums: Vec<f64>,
    pub slopes: Vec<Option<f64>>,
}

/// One pooled group, planned on the fitted data.
#[derive(Debug, Clone, PartialEq)]
pub struct GroupTerm {
    /// The category column.
    pub column: String,
    /// Its levels, in the table's order (the order of the departures).
    pub levels: Vec<String>,
    /// Fitted rows per level.
    pub rows_per_level: Vec<usize>,
    pub layout: GroupLayout,
    pub choice: LayoutChoice,
    /// The numeric predictors whose slopes vary with the group
    /// (`pooled block with girth`, `pooled block with (girth, age)`), in
    /// the order written; empty for varying intercepts only.
    pub slopes: Vec<VaryingSlope>,
    /// For a category outcome (family levels), the outcome level whose log
    /// odds against the reference these departures move; `None` for every
    /// other family. Such a model pools a column once per outcome level
    /// after the reference, each with a spread of its own.
    pub outcome_level: Option<OutcomeLevel>,
    /// For a nested group (`pooled plot within site`), the outer category
    /// and each level's pair of labels; `None` otherwise.
    pub nesting: Option<Nesting>,
}

/// What a nested group's levels are made of.
#[derive(Debug, Clone, PartialEq)]
pub struct Nesting {
    /// The outer category (`site`).
    pub outer: String,
    /// Each level's (outer label, inner label), in the order of the levels.
    pub pairs: Vec<(String, String)>,
}

/// How a level of a nested group is shown: the inner label, then the
/// outer one (`p1 in A`).
pub fn nested_level(inner: &str, outer: &str) -> String {
    format!("{inner} in {outer}")
}

/// The outcome level (after the reference) a levels-family group's
/// departures belong to.
#[derive(Debug, Clone, PartialEq)]
pub struct OutcomeLevel {
    /// 0 for the first level after the reference: the level's run of
    /// coefficients and its linear predictor.
    pub block: usize,
    /// The level's label prefix, `form[shrub vs herb]: `.
    pub prefix: String,
}

/// The predictor of one of a group's varying slopes: its column and the design
/// column (a plain slope of the same model) whose values multiply each
/// level's slope departure, so the departure is on the slope's own scale
/// (the model's centring included).
#[derive(Debug, Clone, PartialEq)]
pub struct VaryingSlope {
    pub column: String,
    pub design_column: usize,
}

impl GroupTerm {
    /// Plan the group of category `column` on `table`; the layout is set
    /// later by [`GroupTerm::settle_layout`].
    pub fn plan(column: &str, table: &Table) -> Result<GroupTerm, ModelError> {
        let (codes, levels) = category_levels(find_column(table, column)?, "the column after `pooled`")?;
        let mut rows_per_level = vec![0usize; levels.len()];
        for &code in codes {
            rows_per_level[code as usize] += 1;
        }
        if levels.len() < 2 {
            return Err(ModelError::Column {
                column: column.to_string(),
                message: format!(
                    "a pooled group needs at least 2 levels to learn how they vary, but `{column}` has {}",
                    levels.len()
                ),
            });
        }
        Ok(GroupTerm {
            column: column.to_string(),
            levels: levels.to_vec(),
            rows_per_level,
            layout: GroupLayout::NonCentred,
            choice: LayoutChoice::FromData { median_ratio: 0.0, rough_spread: 0.0, slopes: Vec::new() },
            slopes: Vec::new(),
            outcome_level: None,
            nesting: None,
        })
    }

    /// Plan the group of category `column` nested within category `outer`
    /// on `table`: one level per pair of labels present in the rows.
    pub fn plan_nested(column: &str, outer: &str, table: &Table) -> Result<GroupTerm, ModelError> {
        let role = format!("the column after `pooled {column} within`");
        let (outer_codes, outer_levels) = category_levels(find_column(table, outer)?, &role)?;
        let (inner_codes, inner_levels) = category_levels(find_column(table, column)?, "the column after `pooled`")?;
        let width = inner_levels.len().max(1);
        let mut rows_per_pair: HashMap<usize, usize> = HashMap::new();
        for (&o, &i) in outer_codes.iter().zip(inner_codes) {
            *rows_per_pair.entry(o as usize * width + i as usize).or_insert(0) += 1;
        }
        let mut present: Vec<(usize, usize)> = rows_per_pair.into_iter().collect();
        present.sort_unstable();
        if present.len() < 2 {
            return Err(ModelError::Column {
                column: column.to_string(),
                message: format!(
                    "a pooled group needs at least 2 levels to learn how they vary, but the rows hold {} pair{} of \
                     `{column}` and `{outer}`",
                    present.len(),
                    if present.len() == 1 { "" } else { "s" }
                ),
            });
        }
        let pairs: Vec<(String, String)> = present
            .iter()
            .map(|&(key, _)| (outer_levels[key / width].clone(), inner_levels[key % width].clone()))
            .collect();
        Ok(GroupTerm {
            column: column.to_string(),
            levels: pairs.iter().map(|(o, i)| nested_level(i, o)).collect(),
            rows_per_level: present.iter().map(|&(_, n)| n).collect(),
            layout: GroupLayout::NonCentred,
            choice: LayoutChoice::FromData { median_ratio: 0.0, rough_spread: 0.0, slopes: Vec::new() },
            slopes: Vec::new(),
            outcome_level: None,
            nesting: Some(Nesting { outer: outer.to_string(), pairs }),
        })
    }

    /// The outer category of a nested group.
    pub fn outer(&self) -> Option<&str> {
        self.nesting.as_ref().map(|n| n.outer.as_str())
    }

    /// How the group is written in a model line, without its slopes:
    /// `block`, or `plot within site`.
    pub fn written(&self) -> String {
        match self.outer() {
            Some(outer) => format!("{} {} {outer}", self.column, crate::model::spec::POOLED_WITHIN),
            None => self.column.clone(),
        }
    }

    /// The same group for outcome level `block + 1` of a category outcome,
    /// its labels starting with `prefix` (`form[shrub vs herb]: `).
    pub fn for_outcome_level(&self, block: usize, prefix: String) -> GroupTerm {
        GroupTerm { outcome_level: Some(OutcomeLevel { block, prefix }), ..self.clone() }
    }

    /// The linear predictor the departures are added to (0 but for a
    /// category outcome's later levels).
    pub fn block(&self) -> usize {
        self.outcome_level.as_ref().map_or(0, |o| o.block)
    }

    /// The start of the group's labels: the outcome level's prefix, or nothing.
    pub fn label_prefix(&self) -> &str {
        self.outcome_level.as_ref().map_or("", |o| o.prefix.as_str())
    }

    /// Set the layout: the declared one, else the rule of the module docs
    /// with `row_information` (`I`, one row's information about the linear
    /// predictor at the outcome's mean), `level_means` (each level's raw
    /// mean outcome on the link scale, `None` for a level without rows) and
    /// `slope_evidence` (one per varying slope, in order).
    pub fn settle_layout(
        &mut self,
        declared: Option<GroupLayout>,
        row_information: f64,
        level_means: &[Option<f64>],
        slope_evidence: &[SlopeEvidence],
    ) {
        if let Some(layout) = declared {
            self.layout = layout;
            self.choice = LayoutChoice::Declared;
            return;
        }
        let rough_spread = rough_departure_spread(&self.rows_per_level, row_information, level_means);
        let ratios: Vec<f64> = self
            .rows_per_level
            .iter()
            .filter(|&&n| n > 0)
            .map(|&n| n as f64 * row_information * rough_spread * rough_spread)
            .collect();
        let median_ratio = median(ratios);
        let slopes: Vec<(f64, f64)> = slope_evidence.iter().map(|e| slope_ratio(e, row_information)).collect();
        let centred = if median_ratio >= CENTRED_AT {
            1 + slopes.iter().take_while(|(ratio, _)| *ratio >= SLOPE_CENTRED_AT).count()
        } else {
            0
        };
        self.layout = match centred {
            0 => GroupLayout::NonCentred,
            n if n == 1 + slopes.len() => GroupLayout::Centred,
            n => GroupLayout::CentredFirst(n),
        };
        self.choice = LayoutChoice::FromData { median_ratio, rough_spread, slopes };
    }

    /// The level index of every row of `table` (`None` for a level the
    /// fitted data did not have, or for every row when the table lacks the
    /// column: such rows belong to a new group).
    pub fn level_of_rows(&self, table: &Table) -> Result<Vec<Option<usize>>, ModelError> {
        if let Some(nesting) = &self.nesting {
            return self.nested_level_of_rows(nesting, table);
        }
        let Some(found) = table.column(&self.column) else {
            return Ok(vec![None; table.nrows()]);
        };
        let (codes, table_levels) = category_levels(found, "a pooled group")?;
        let mapping: Vec<Option<usize>> =
            table_levels.iter().map(|label| self.levels.iter().position(|l| l == label)).collect();
        Ok(codes.iter().map(|&c| mapping[c as usize]).collect())
    }

    /// [`GroupTerm::level_of_rows`] of a nested group: a row's level is its
    /// pair of labels, `None` for a pair the fitted rows did not hold.
    fn nested_level_of_rows(&self, nesting: &Nesting, table: &Table) -> Result<Vec<Option<usize>>, ModelError> {
        let (Some(outer), Some(inner)) = (table.column(&nesting.outer), table.column(&self.column)) else {
            return Ok(vec![None; table.nrows()]);
        };
        let (outer_codes, outer_levels) = category_levels(outer, "the outer category of a nested pooled group")?;
        let (inner_codes, inner_levels) = category_levels(inner, "a pooled group")?;
        let index: HashMap<(&str, &str), usize> =
            nesting.pairs.iter().enumerate().map(|(k, (o, i))| ((o.as_str(), i.as_str()), k)).collect();
        Ok(outer_codes
            .iter()
            .zip(inner_codes)
            .map(|(&o, &i)| index.get(&(outer_levels[o as usize].as_str(), inner_levels[i as usize].as_str())).copied())
            .collect())
    }

    /// A note on the group for the model table: levels, rows, the layout
    /// and why.
    pub fn note(&self) -> String {
        let (fewest, most) = (
            self.rows_per_level.iter().copied().min().unwrap_or(0),
            self.rows_per_level.iter().copied().max().unwrap_or(0),
        );
        let centred_names = |n: usize| -> String {
            std::iter::once("intercept").chain(self.slopes.iter().map(|s| s.column.as_str())).take(n).collect::<Vec<_>>().join(", ")
        };
        let why = match &self.choice {
            LayoutChoice::Declared => match self.layout {
                GroupLayout::CentredFirst(n) => format!("as the parameterise line says; centred: {}, the rest non-centred", centred_names(n)),
                _ => "as the parameterise line says".to_string(),
            },

            LayoutChoice::FromData { median_ratio, rough_spread, slopes } => {
                let mut why = format!(
                    "chosen from the data: the level means suggest a spread of about {} on the link scale, and with \
                     it the median level's rows tell {} times what the population does about its departure",
                    short_number(*rough_spread),
                    short_number(*median_ratio)
                );
                for (slope, (ratio, spread)) in self.slopes.iter().zip(slopes) {
                    why.push_str(&format!(
                        "; the levels' own {x} slopes suggest a spread of about {} for its departures, and the median \
                         level's rows (with their spread in {x}) tell {} times what the population does",
                        short_number(*spread),
                        short_number(*ratio),
                        x = slope.column
                    ));
                }
                let split = match self.layout {
                    GroupLayout::CentredFirst(n) => format!(
                        "; slopes below {SLOPE_CENTRED_AT} are sampled non-centred, with every slope after them (centred: {})",
                        centred_names(n)
                    ),
                    _ => String::new(),
                };
                format!(
                    "{why}; centred from {CENTRED_AT}{split}; a `parameterise {} centred|noncentred|centred N` line overrides this",
                    self.column
                )
            }
        };
        let what = match self.slopes.as_slice() {
            [] => format!("the departures normal(0, {} spread) with the spread learned", self.column),
            [slope] => format!(
                "and the slope of {x} departing too: each level's two departures jointly normal around 0 with \
                 spreads {c} spread and {c} {x} spread and correlation {c} correlation[intercept, {x}], all learned",
                x = slope.column,
                c = self.column
            ),
            slopes => {
                let names: Vec<&str> = slopes.iter().map(|s| s.column.as_str()).collect();
                let spreads: Vec<String> = names.iter().map(|x| format!("{} {x} spread", self.column)).collect();
                format!(
                    "and the slopes of {} departing too: each level's {} departures jointly normal around 0 with \
                     spreads {} spread, {} and the {} correlations {c} correlation[…] between them, all learned",
                    names.join(", "),
                    slopes.len() + 1,
                    self.column,
                    spreads.join(", "),
                    (slopes.len() + 1) * slopes.len() / 2,
                    c = self.column
                )
            }
        };
        let outcome_level = match &self.outcome_level {
            Some(o) => format!(" on the log odds of {}", o.prefix.trim_end_matches([':', ' '])),
            None => String::new(),
        };
        let nested = match self.outer() {
            Some(outer) => format!(
                " (each a pair of a {c} label and its {outer}, so {c} labels may repeat across {outer} levels; shown as \
                 `<{c}> in <{outer}>`)",
                c = self.column
            ),
            None => String::new(),
        };
        format!(
            "pooled {}{outcome_level}: {} levels{nested} ({} to {} rows each), each departing from the population by its own amount on \
             the link scale, {what}; sampled {} ({why})",
            self.written(),
            self.levels.len(),
            fewest,
            most,
            self.layout.word()
        )
    }
}

/// `τ̂` of the module docs: the spread of the level means less what their
/// own noise explains, 0 when that is negative or fewer than 3 levels have rows.
pub fn rough_departure_spread(rows_per_level: &[usize], row_information: f64, level_means: &[Option<f64>]) -> f64 {
    let seen: Vec<(f64, f64)> = rows_per_level
        .iter()
        .zip(level_means)
        .filter_map(|(&n, m)| m.filter(|_| n > 0).map(|m| (n as f64, m)))
        .collect();
    if seen.len() < 3 || !(row_information > 0.0) {
        return 0.0;
    }
    let k = seen.len() as f64;
    let mean = seen.iter().map(|(_, m)| m).sum::<f64>() / k;
    let between = seen.iter().map(|(_, m)| (m - mean).powi(2)).sum::<f64>() / (k - 1.0);
    let noise = seen.iter().map(|(n, _)| 1.0 / (n * row_information)).sum::<f64>() / k;
    (between - noise).max(0.0).sqrt()
}

/// The median of `values` (0 for none).
fn median(mut values: Vec<f64>) -> f64 {
    values.sort_by(f64::total_cmp);
    match values.len() {
        0 => 0.0,
        n if n % 2 == 1 => values[n / 2],
        n => 0.5 * (values[n / 2 - 1] + values[n / 2]),
    }
}

/// A varying slope's median information ratio and rough spread (module
/// docs): `τ̂ₓ² = var(bⱼ) − mean(1/(I·Sₓₓ,ⱼ))` over the levels with a
/// slope of their own (0 when negative or with fewer than 3 such levels),
/// and level `j`'s ratio `I·Sₓₓ,ⱼ·τ̂ₓ²`.
pub fn slope_ratio(evidence: &SlopeEvidence, row_information: f64) -> (f64, f64) {
    let seen: Vec<(f64, f64)> = evidence
        .spread_sums
        .iter()
        .zip(&evidence.slopes)
        .filter_map(|(&sxx, b)| b.filter(|_| sxx > 0.0).map(|b| (sxx, b)))
        .collect();
    if seen.len() < 3 || !(row_information > 0.0) {
        return (0.0, 0.0);
    }
    let k = seen.len() as f64;
    let mean = seen.iter().map(|(_, b)| b).sum::<f64>() / k;
    let between = seen.iter().map(|(_, b)| (b - mean).powi(2)).sum::<f64>() / (k - 1.0);
    let noise = seen.iter().map(|(sxx, _)| 1.0 / (sxx * row_information)).sum::<f64>() / k;
    let spread = (between - noise).max(0.0).sqrt();
    (median(seen.iter().map(|(sxx, _)| row_information * sxx * spread * spread).collect()), spread)
}
