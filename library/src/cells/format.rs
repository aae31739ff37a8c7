//! Number formatting shared by every table a cell prints.

/// A number with about four significant digits, without exponent for the
/// magnitudes a scientist meets in a summary table.
pub fn num(x: f64) -> String {
    if !x.is_finite() {
        return if x.is_nan() { "—".to_string() } else { format!("{x}") };
    }
    let a = x.abs();
    let decimals = if a >= 1000.0 {
        0
    } else if a >= 100.0 {
        1
    } else if a >= 10.0 {
        2
    } else if a >= 1.0 || a == 0.0 {
        3
    } else if a >= 0.001 {
        (3.0 - a.log10().floor()) as usize
    } else {
        return format!("{x:.3e}");
    };
    format!("{x:.decimals$}")
}

/// A number followed by its unit (`2.310 kg`), or alone when it has none.
pub fn with_unit(x: f64, unit: Option<&str>) -> String {
    match unit {
        Some(u) if !u.is_empty() => format!("{} {u}", num(x)),
        _ => num(x),
    }
}

#[cfg(test)]
mod tests {
    use super::num;

    #[test]
    fn numbers_keep_about_four_significant_digits() {
        assert_eq!(num(1234.567), "1235");
        assert_eq!(num(12.3456), "12.35");
        assert_eq!(num(0.012345), "0.01235");
        assert_eq!(num(-2.5), "-2.500");
        assert_eq!(num(0.0), "0.000");
        assert_eq!(num(0.00001234), "1.234e-5");
    }
}
