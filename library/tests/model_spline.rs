//! The B-spline basis against properties and values from the literature;
//! the full comparison with scipy is in tests/python/test_model_reference.py.

use waypath::model::spline::{quantile_knots, quantiles, BSplineBasis};

/// Source: B-splines on a clamped knot vector are non-negative and sum to
/// one everywhere on the range (partition of unity; de Boor, A Practical
/// Guide to Splines, ch. IX; recalled).
#[test]
fn basis_is_a_partition_of_unity() {
    let basis = BSplineBasis::clamped(0.0, 10.0, &[1.0, 2.5, 2.6, 7.0], 3);
    assert_eq!(basis.len(), 8);
    for i in 0..=1000 {
        let row = basis.row(i as f64 / 100.0);
        assert!(row.iter().all(|&v| v >= 0.0));
        assert!((row.iter().sum::<f64>() - 1.0).abs() < 1e-14, "at {}: {row:?}", i as f64 / 100.0);
    }
}

/// Source: the uniform cubic B-spline takes the values 1/6, 2/3, 1/6 at its
/// interior knots and 1/48, 23/48, 23/48, 1/48 at the mid-points of a knot
/// span (standard uniform cubic B-spline values; recalled).
#[test]
fn uniform_cubic_values_at_knots_and_mid_points() {
    let knots: Vec<f64> = (0..12).map(f64::from).collect();
    let basis = BSplineBasis::from_knots(knots, 3);
    let at_knot = basis.row(5.0);
    assert!((at_knot[2] - 1.0 / 6.0).abs() < 1e-15 && (at_knot[3] - 2.0 / 3.0).abs() < 1e-15);
    assert!((at_knot[4] - 1.0 / 6.0).abs() < 1e-15);
    let mid = basis.row(5.5);
    let expected = [1.0 / 48.0, 23.0 / 48.0, 23.0 / 48.0, 1.0 / 48.0];
    for (value, want) in mid[2..6].iter().zip(expected) {
        assert!((value - want).abs() < 1e-15, "{mid:?}");
    }
}

/// Clamped ends: the first function is 1 at the lower end and the last is
/// 1 at the upper end (clamped knot vectors interpolate the end control
/// points; recalled).
#[test]
fn clamped_ends_interpolate() {
    let basis = BSplineBasis::clamped(2.0, 9.0, &[4.0, 6.0], 3);
    assert_eq!(basis.row(2.0)[0], 1.0);
    assert_eq!(basis.row(9.0)[basis.len() - 1], 1.0);
}

/// Source: numpy's default (linear) quantile of [1, 2, 3, 4] at 1/3 is
/// 1 + 3·(1/3) = 2 (position (n − 1)p; numpy.quantile documentation).
#[test]
fn quantiles_interpolate_between_order_statistics() {
    assert_eq!(quantiles(&[4.0, 1.0, 3.0, 2.0], &[0.0, 0.5, 1.0]), vec![1.0, 2.5, 4.0]);
    let knots = quantile_knots(&[4.0, 1.0, 3.0, 2.0], 6, 3);
    assert!((knots[0] - 2.0).abs() < 1e-15 && (knots[1] - 3.0).abs() < 1e-15, "{knots:?}");
}
