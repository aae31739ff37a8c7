//! Checks made at model build, before anything is planned or allocated, that
//! refuse what the model could not represent: columns whose scale does not
//! fit in double precision, and designs too large for the machine's memory.
//!
//! Why here: the default priors, the centring and the likelihood all square
//! and divide the data's spreads. A column with values near 1e200 makes those
//! overflow to infinity, and the fit then fails far from the cause with
//! advice about priors. Saying so at build names the column and the fix.

use crate::limits::{bytes_for, check_memory};
use crate::table::{ColumnData, Table};

use super::error::ModelError;
use super::spec::{ModelSpec, TermSpec};

/// The largest magnitude (and the inverse of the smallest non-zero spread) a
/// model column may have. Squared deviations must stay below the largest
/// double (about 1.8e308, IEEE 754) even when summed over many rows, so
/// magnitudes must stay well below 1e154; 1e150 leaves room for the sums.
pub const SCALE_LIMIT: f64 = 1e150;

/// Every numeric column the model reads (outcome and predictors) must have a
/// representable scale; the error names the column and what to do.
pub fn check_scales(spec: &ModelSpec, table: &Table) -> Result<(), ModelError> {
    let names = std::iter::once(spec.outcome.as_str()).chain(spec.terms.iter().map(TermSpec::predictor));
    for name in names {
        let Some(column) = table.column(name) else { continue };
        let values: Vec<f64> = match &column.data {
            ColumnData::Real(v) => v.clone(),
            ColumnData::Count(v) => v.iter().map(|&x| x as f64).collect(),
            ColumnData::Binary(_) | ColumnData::Category { .. } => continue,
        };
        check_column_scale(name, &values)?;
    }
    Ok(())
}

/// The scale check of one column's values.
fn check_column_scale(name: &str, values: &[f64]) -> Result<(), ModelError> {
    let largest = values.iter().fold(0.0_f64, |m, v| m.max(v.abs()));
    let problem = |message: String| ModelError::Column { column: name.to_string(), message };
    if largest > SCALE_LIMIT {
        return Err(problem(format!(
            "values as large as {largest:e} have a spread whose square cannot be represented in double precision \
             (the limit is {SCALE_LIMIT:e}); rescale the column, e.g. divide it by a power of ten and note the unit"
        )));
    }
    let spread = spread(values, largest);
    if spread > 0.0 && spread < 1.0 / SCALE_LIMIT {
        return Err(problem(format!(
            "its values spread by only {spread:e}, too little to be represented against the other columns \
             (the limit is {:e}); rescale the column, e.g. multiply it by a power of ten and note the unit",
            1.0 / SCALE_LIMIT
        )));
    }
    Ok(())
}

/// The standard deviation of `values`, computed on values divided by their
/// largest magnitude so that no square overflows.
fn spread(values: &[f64], largest: f64) -> f64 {
    if values.len() < 2 || largest == 0.0 {
        return 0.0;
    }
    let n = values.len() as f64;
    let mean = values.iter().map(|v| v / largest).sum::<f64>() / n;
    let variance = values.iter().map(|v| (v / largest - mean).powi(2)).sum::<f64>() / (n - 1.0);
    variance.sqrt() * largest
}

/// Refuse a design whose columns would not fit in memory: every term's
/// columns for every row, held three times (the design, its transpose and
/// the likelihood's row-major copy).
pub fn check_design_size(spec: &ModelSpec, table: &Table) -> Result<(), ModelError> {
    let rows = table.nrows();
    for term in &spec.terms {
        let width = match term {
            TermSpec::Spline { functions, .. } => *functions,
            TermSpec::Powers { degree, .. } => *degree,
            // A steps term has a column per level after the lowest.
            TermSpec::Steps { predictor, .. } => match table.column(predictor).and_then(|c| c.data.levels()) {
                Some(levels) => levels.len().saturating_sub(1),
                None => continue,
            },
            TermSpec::Column(_) | TermSpec::Per { .. } | TermSpec::Pooled { .. } => continue,
        };
        check_memory(&format!("the term {term}: {width} columns over {rows} rows"), bytes_for(&[rows.max(1), width, 3]))
            .map_err(|message| ModelError::Term { term: term.to_string(), message: without_prefix(&message, term) })?;
    }
    Ok(())
}

/// The memory sentence without its leading "the term …:" (the error already names the term).
fn without_prefix(message: &str, term: &TermSpec) -> String {
    message.strip_prefix(&format!("the term {term}: ")).unwrap_or(message).to_string()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn spread_of_huge_values_is_computed_without_overflow() {
        // The sample sd of {1, 2, 3} is 1 (definition of the sample variance); scaled by 1e140
        // the naive sum of squares stays finite, but at 1e200 it would overflow.
        let scaled: Vec<f64> = [1.0, 2.0, 3.0].iter().map(|v| v * 1e140).collect();
        assert!((spread(&scaled, 3e140) / 1e140 - 1.0).abs() < 1e-12);
    }

    #[test]
    fn values_near_1e200_are_refused_with_the_column_named() {
        let error = check_column_scale("yield", &[1e200, -1e200, 3e199]).unwrap_err().to_string();
        assert!(error.contains("yield") && error.contains("rescale"), "{error}");
        assert!(check_column_scale("yield", &[1e10, 2e10, -5e9]).is_ok());
    }

    #[test]
    fn a_spread_below_the_inverse_limit_is_refused() {
        let error = check_column_scale("dose", &[1e-160, 2e-160, 3e-160]).unwrap_err().to_string();
        assert!(error.contains("dose") && error.contains("spread"), "{error}");
    }
}
