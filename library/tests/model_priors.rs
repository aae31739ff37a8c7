//! Default priors follow the documented data-scaled rule and every prior in
//! use is listed. Means and sds are computed here with statrs's statistics
//! as the reference.

mod model_fixtures;

use model_fixtures::{build, orchard};
use statrs::statistics::Statistics;
use waypath::model::{Prior, PriorGroup};

#[test]
fn defaults_scale_with_the_outcome_and_predictor() {
    let table = orchard(90, 12);
    let model = build("yield from girth using trees\nprior slopes: normal(0, 1.5)", &table);
    let y = table.column("yield").and_then(|c| c.data.as_reals()).expect("yield");
    let (y_mean, y_sd) = (y.as_slice().mean(), y.as_slice().std_dev());
    let used = model.priors_used();
    assert_eq!(used.len(), 3);
    // Intercept: normal(ȳ, 2·s_y), a default.
    let Prior::Normal { mean, sd } = used[0].prior else { panic!("{:?}", used[0]) };
    assert!((mean - y_mean).abs() < 1e-12 && (sd - 2.0 * y_sd).abs() < 1e-12 && !used[0].declared);
    // Slope: as declared.
    assert_eq!((used[1].group, used[1].declared), (PriorGroup::Slopes, true));
    assert_eq!(used[1].prior.to_string(), "normal(0, 1.5)");
    // Spread: exponential with mean s_y.
    let Prior::Exponential { rate } = used[2].prior else { panic!("{:?}", used[2]) };
    assert!((1.0 / rate - y_sd).abs() < 1e-12);
    assert_eq!(used[2].parameters, vec!["spread".to_string()]);
}

#[test]
fn default_slope_prior_widens_as_the_predictor_narrows() {
    let table = orchard(90, 12);
    let model = build("yield from girth using trees", &table);
    let y_sd = table.column("yield").and_then(|c| c.data.as_reals()).expect("yield").as_slice().std_dev();
    let x_sd = table.column("girth").and_then(|c| c.data.as_reals()).expect("girth").as_slice().std_dev();
    let Prior::Normal { mean, sd } = model.priors_used()[1].prior else { panic!() };
    assert_eq!(mean, 0.0);
    assert!((sd - 2.0 * y_sd / x_sd).abs() < 1e-12);
    let x_mean = table.column("girth").and_then(|c| c.data.as_reals()).expect("girth").as_slice().mean();
    let note = model.notes().iter().find(|n| n.starts_with("girth centred at ")).expect("centring note");
    let printed: f64 = note["girth centred at ".len()..].split(' ').next().and_then(|v| v.parse().ok()).expect("number");
    assert!((printed - x_mean).abs() < 1e-3 * x_mean.abs(), "{note}");
}
