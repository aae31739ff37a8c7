//! Summaries of draws against closed forms and textbook definitions.
//! (Intervals are also checked against scipy.stats in
//! tests/python/test_diagnostics_reference.py.)

use rand::rngs::StdRng;
use rand::SeedableRng;
use rand_distr::{Distribution, Exp, Normal};
use waypath::draws::{hdi, quantile_interval, Draws, DrawsError, SummarySpec};

fn one_param(name: &str, values: &[f64], chains: usize) -> Draws {
    let per = values.len() / chains;
    let rows = (0..chains).map(|c| values[c * per..(c + 1) * per].iter().map(|&v| vec![v]).collect()).collect();
    Draws::from_chains(vec![name.to_string()], rows).expect("well-formed draws")
}

#[test]
fn from_chains_keeps_chain_order_and_pairs_parameters_by_draw() {
    let chains = vec![
        vec![vec![1.0, 10.0], vec![2.0, 20.0]],
        vec![vec![3.0, 30.0], vec![4.0, 40.0]],
    ];
    let d = Draws::from_chains(vec!["a".into(), "b".into()], chains).expect("well-formed draws");
    assert_eq!((d.chains, d.per_chain, d.len()), (2, 2, 4));
    assert_eq!(d.get("b"), Some(&[10.0, 20.0, 30.0, 40.0][..]));
    assert_eq!(d.by_chain("a").expect("known"), vec![&[1.0, 2.0][..], &[3.0, 4.0][..]]);
}

#[test]
fn malformed_chains_are_reported_by_chain_and_draw() {
    let err = Draws::from_chains(vec!["a".into(), "b".into()], vec![vec![vec![1.0, 2.0], vec![1.0]]]).unwrap_err();
    assert_eq!(
        err.to_string(),
        "chain 1, draw 2 has 1 values but 2 parameter names were given; give one name per parameter"
    );
    let err = Draws::from_chains(vec!["a".into()], vec![vec![vec![1.0]; 3], vec![vec![1.0]; 2]]).unwrap_err();
    assert!(matches!(err, DrawsError::ChainLength { chain: 2, expected: 3, got: 2 }));
    let d = one_param("a", &[1.0, 2.0], 1);
    assert_eq!(d.summary_of("b", &SummarySpec::default()).unwrap_err().to_string(), "no parameter named `b`; the draws hold: a");
    assert!(matches!(quantile_interval(&[1.0], 1.5), Err(DrawsError::BadMass(_))));
}

#[test]
fn quantile_interval_interpolates_between_order_statistics() {
    // Linear interpolation at position p (n - 1), Hyndman & Fan (1996)
    // definition 7 (recalled): for 1..=10 the 5% quantile is 1 + 0.45 and
    // the 95% quantile is 9 + 0.55.
    let x: Vec<f64> = (1..=10).map(f64::from).collect();
    let q = quantile_interval(&x, 0.9).expect("valid mass");
    assert!((q.lower - 1.45).abs() < 1e-12 && (q.upper - 9.55).abs() < 1e-12);
    assert_eq!(q.mass, 0.9);
}

#[test]
fn exponential_draws_summaries_match_closed_forms() {
    // Exponential(rate 2) (recalled closed forms): mean = sd = 1/2; the
    // density decreases, so the HDI of mass m is [0, -ln(1 - m)/2]; the
    // central interval is [-ln(1 - a)/2, -ln(a)/2] with a = (1 - m)/2.
    let n = 200_000;
    let mut rng = StdRng::seed_from_u64(21);
    let exp = Exp::new(2.0).expect("valid rate");
    let x: Vec<f64> = (0..n).map(|_| exp.sample(&mut rng)).collect();
    let d = one_param("wait", &x, 4);
    let s = d.summary_of("wait", &SummarySpec { mass: 0.8, hdi: true }).expect("known");
    let se = 0.5 / (n as f64).sqrt();
    assert!((s.mean - 0.5).abs() < 5.0 * se);
    assert!((s.sd - 0.5).abs() < 5.0 * se * 2f64.sqrt());
    // Quantile standard error sqrt(p(1-p)/n)/f(q), f(q) = 2(1 - p) here.
    let q_se = |p: f64| (p * (1.0 - p) / n as f64).sqrt() / (2.0 * (1.0 - p));
    assert!((s.interval.lower - (-(0.9f64).ln() / 2.0)).abs() < 5.0 * q_se(0.1));
    assert!((s.interval.upper - (-(0.1f64).ln() / 2.0)).abs() < 5.0 * q_se(0.9));
    let h = s.hdi.expect("asked for");
    assert!(h.lower < 1e-3, "HDI lower {}", h.lower);
    assert!((h.upper - (-(0.2f64).ln() / 2.0)).abs() < 5.0 * q_se(0.8));
    assert_eq!((s.interval.mass, h.mass), (0.8, 0.8));
    assert_eq!(s.prob_positive, 1.0);
}

#[test]
fn probability_above_zero_matches_the_normal_cdf() {
    // P(N(0.5, 1) > 0) = Phi(0.5) = 0.691462 (recalled, standard normal table).
    let n = 100_000;
    let mut rng = StdRng::seed_from_u64(4);
    let normal = Normal::new(0.5, 1.0).expect("valid");
    let x: Vec<f64> = (0..n).map(|_| normal.sample(&mut rng)).collect();
    let s = one_param("effect", &x, 1).summary_of("effect", &SummarySpec::default()).expect("known");
    let p = 0.691462;
    assert!((s.prob_positive - p).abs() < 5.0 * (p * (1.0 - p) / n as f64).sqrt());
    // For a symmetric distribution the HDI and the central interval coincide.
    let h = hdi(&x, 0.9).expect("valid mass");
    assert!((h.lower - s.interval.lower).abs() < 0.03 && (h.upper - s.interval.upper).abs() < 0.03);
}

#[test]
fn derived_contrast_is_paired_draw_by_draw() {
    // Var(a - b) = Var(a) + Var(b) - 2 Cov(a, b): with b = a - 2 the
    // contrast has no spread at all, which only a paired difference shows.
    let mut rng = StdRng::seed_from_u64(9);
    let normal = Normal::new(0.0, 1.0).expect("valid");
    let rows: Vec<Vec<f64>> = (0..500).map(|_| {
        let a: f64 = normal.sample(&mut rng);
        vec![a, a - 2.0]
    }).collect();
    let mut d = Draws::from_chains(vec!["standard".into(), "dwarf".into()], vec![rows]).expect("well-formed");
    d.add_derived("standard - dwarf", &["standard", "dwarf"], |v| v[0] - v[1]).expect("inputs known");
    let s = d.summary_of("standard - dwarf", &SummarySpec::default()).expect("added");
    assert!((s.mean - 2.0).abs() < 1e-12 && s.sd < 1e-12);
    assert!(matches!(d.add_derived("dwarf", &["standard"], |v| v[0]), Err(DrawsError::DuplicateName(_))));
    assert!(matches!(d.derive(&["rootstock"], |v| v[0]), Err(DrawsError::UnknownParameter { .. })));
}
