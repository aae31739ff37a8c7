//! Reading one text field as a value of a column kind, and inferring the kind
//! of an undeclared column from its fields.
//!
//! Kept free of rows, files and columns: each reader returns either the value
//! or the problem in words, and the loader adds the place.

use super::ColumnKind;

/// Empty fields and `NA` stand for a missing value.
pub fn is_missing(field: &str) -> bool {
    field.is_empty() || field == "NA"
}

/// `0/1`, `yes/no`, `true/false` in any letter case.
pub fn parse_binary(field: &str) -> Option<bool> {
    const TRUE: [&str; 3] = ["1", "yes", "true"];
    const FALSE: [&str; 3] = ["0", "no", "false"];
    if TRUE.iter().any(|w| field.eq_ignore_ascii_case(w)) {
        Some(true)
    } else if FALSE.iter().any(|w| field.eq_ignore_ascii_case(w)) {
        Some(false)
    } else {
        None
    }
}

/// Why a field could not be read: the problem and what to do, in words.
#[derive(Debug, Clone, PartialEq)]
pub struct ValueProblem {
    pub problem: String,
    pub advice: String,
}

impl ValueProblem {
    fn new(problem: &str, advice: &str) -> Self {
        ValueProblem { problem: problem.into(), advice: advice.into() }
    }
}

const MISSING_ADVICE: &str =
    "fix the row, or write a missing value as NA or an empty field and add \"drop missing\"";

/// A finite real number.
pub fn parse_real(field: &str) -> Result<f64, ValueProblem> {
    match field.parse::<f64>() {
        Ok(x) if x.is_finite() => Ok(x),
        Ok(_) => Err(ValueProblem::new(
            "is not a finite number",
            "replace it with a measured value, or with NA and add \"drop missing\"",
        )),
        Err(_) if field.replacen(',', ".", 1).parse::<f64>().is_ok() => Err(ValueProblem::new(
            "is not a number",
            "write the decimal mark as a point, e.g. 3.5",
        )),
        Err(_) => Err(ValueProblem::new("is not a number", MISSING_ADVICE)),
    }
}

/// A non-negative whole number. `3.0` reads as 3 (spreadsheets write whole
/// numbers so); numbers above 2^53 must be written without a decimal point.
pub fn parse_count(field: &str) -> Result<u64, ValueProblem> {
    if let Ok(n) = field.parse::<u64>() {
        return Ok(n);
    }
    const EXACT_LIMIT: f64 = 9_007_199_254_740_992.0; // 2^53: beyond it f64 skips integers
    match field.parse::<f64>() {
        Ok(x) if !x.is_finite() => Err(ValueProblem::new(
            "is not a finite number",
            "replace it with a counted value, or with NA and add \"drop missing\"",
        )),
        Ok(x) if x < 0.0 => Err(ValueProblem::new(
            "is negative, and a count cannot be",
            "fix the row, or declare the column real if negative values are possible",
        )),
        Ok(x) if x.fract() == 0.0 && x <= EXACT_LIMIT => Ok(x as u64),
        Ok(_) => Err(ValueProblem::new(
            "is not a whole number",
            "fix the row, or declare the column real if fractional values are possible",
        )),
        Err(_) => Err(ValueProblem::new("is not a count, a whole number 0 or more", MISSING_ADVICE)),
    }
}

/// A binary value (see [`parse_binary`]).
pub fn parse_binary_field(field: &str) -> Result<bool, ValueProblem> {
    parse_binary(field).ok_or_else(|| {
        ValueProblem::new(
            "is not a binary value",
            "write 0/1, yes/no or true/false, or declare the column a category",
        )
    })
}

/// The kind an undeclared column is read as, from its non-missing fields:
///
/// * every field binary (`0/1`, `yes/no`, `true/false`) → binary;
/// * every field a whole number ≥ 0 → count;
/// * more than half the fields numbers → real (the rest are then reported
///   as errors, since a stray word in a numeric column is usually a typo);
/// * otherwise → category, levels in order of first appearance.
///
/// A column with no values at all is read as real (its missing values are
/// reported).
pub fn infer_kind<'a>(fields: impl Iterator<Item = &'a str>) -> ColumnKind {
    let (mut seen, mut binary, mut whole, mut numeric) = (0usize, 0usize, 0usize, 0usize);
    for field in fields.filter(|f| !is_missing(f)) {
        seen += 1;
        binary += usize::from(parse_binary(field).is_some());
        if field.bytes().all(|b| b.is_ascii_digit()) {
            whole += 1;
            numeric += 1;
        } else if field.parse::<f64>().is_ok() {
            numeric += 1;
        }
    }
    if seen == 0 {
        ColumnKind::Real
    } else if binary == seen {
        ColumnKind::Binary
    } else if whole == seen {
        ColumnKind::Count
    } else if 2 * numeric > seen {
        ColumnKind::Real
    } else {
        ColumnKind::Category
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn inference_follows_documented_order() {
        assert_eq!(infer_kind(["1", "0", "", "1"].into_iter()), ColumnKind::Binary);
        assert_eq!(infer_kind(["Yes", "no"].into_iter()), ColumnKind::Binary);
        assert_eq!(infer_kind(["3", "0", "12"].into_iter()), ColumnKind::Count);
        assert_eq!(infer_kind(["3", "-1", "2.5"].into_iter()), ColumnKind::Real);
        assert_eq!(infer_kind(["3.1", "n/a", "2.5"].into_iter()), ColumnKind::Real);
        assert_eq!(infer_kind(["dwarf", "standard", "7"].into_iter()), ColumnKind::Category);
        assert_eq!(infer_kind(["NA", ""].into_iter()), ColumnKind::Real);
    }

    #[test]
    fn counts_accept_whole_decimals_only() {
        assert_eq!(parse_count("3.0"), Ok(3));
        assert!(parse_count("3.5").is_err());
        assert!(parse_count("-2").is_err());
    }
}
