//! Probe for the model and Laplace reference checks.
//!
//! Request (JSON on stdin), by `action`:
//! * `fit` — `columns` (name → `{"real": [...]}`, `{"count": [...]}`,
//!   `{"binary": [...]}` or `{"category": {"codes": [...], "levels": [...]}}`)
//!   and `model` (body lines of a model cell). Answers `names`, `mode`
//!   (constrained), `design` (rows), `notes`, `family`; for a category
//!   outcome also `levels` and `probabilities` (each fitted row's level
//!   probabilities at the mode).
//! * `log_likelihood` — as `fit`, plus `params` (constrained); answers
//!   `log_likelihood` and `design`.
//! * `pointwise` — as `log_likelihood`; answers `log_densities` (each
//!   fitted row's log density at `params`) and `names`.
//! * `tail_fit` — `x` (exceedances); answers the generalised Pareto fit
//!   `shape` and `scale` (Zhang–Stephens) and `regularised_shape`.
//! * `tail_functions` — `shape`, `scale`, `p` and `at`; answers `quantiles`
//!   at the shares `p` and `log_densities` at the values `at`.
//! * `basis` — `x`, `knots` (full vector), `degree`; answers `rows`.
//! * `prior` — `prior` (text such as `normal(0, 2)`) and `x`; answers `log_density`;
//!   with `draws` and `seed` also `sample`, that many draws from the prior.
//! * `calibrate` — as `fit`, plus `reps`, `seed` and `draws` (NUTS draws of
//!   one chain, 300 settling iterations); answers the calibration structure (ranks,
//!   chi-square and p-value per parameter).
//! * `nuts` — as `fit`, plus `chains`, `settle`, `draws` and `seed`: a
//!   NUTS fit; answers `names`, and per parameter `mean`, `median` and `sd`
//!   of the draws and `r_hat`, with `divergences` and `largest_r_hat`.
//! * `prior_draws` — as `fit`, plus `draws` and `seed`: that many draws of
//!   every parameter from the model's priors (`query::calibrate::prior_draw`,
//!   which `calibrate` and `prior check` use); answers `names` and `draws`
//!   (one row per draw).
//! * `contrast` — as `fit`, plus `variable`, `draws` and `seed`: a Laplace
//!   fit, then the default contrast of `variable` averaged over rows;
//!   answers `names`, `params` (constrained draws), `to`, `from` and
//!   `differences` (per draw); for a category outcome, `levels` (one
//!   `{level, differences}` per outcome level) in place of `differences`.
//!   An optional `between` (`[b, a]`) compares `b` with `a`; an optional
//!   `on` (`scores`, `log-times`, `medians`, `events by T`, `quantile q`)
//!   sets the scale, and the answer then also has `notes` and `unit_free`
//!   (no outcome unit); `mass` sets the interval mass and `over_rows: false`
//!   holds the other predictors instead of averaging over the rows. A time
//!   model's answer has `curves` (`times`, and per setting the survival and
//!   hazard bands).
//! * `implications` — `columns`, `graph` (body lines), `draws`, `seed` and
//!   `mass`: the graph's implications checked against the columns with a
//!   Laplace fit; answers the report (checks with their associations).

use serde_json::{json, Value};
use std::sync::atomic::AtomicBool;

use waypath::infer::fit::Method;
use waypath::infer::laplace::laplace;
use waypath::infer::nuts::NutsSettings;
use waypath::model::spline::BSplineBasis;
use waypath::model::{Model, ModelSpec, NewRows, Prior};
use waypath::table::{Column, ColumnData, Table};

fn main() {
    let request = waypath_probe::read_request();
    let answer = match request["action"].as_str() {
        Some("fit") => fit(&request),
        Some("log_likelihood") => log_likelihood(&request),
        Some("pointwise") => pointwise(&request),
        Some("tail_fit") => tail_fit(&request),
        Some("tail_functions") => tail_functions(&request),
        Some("basis") => basis(&request),
        Some("prior") => prior(&request),
        Some("calibrate") => calibrate(&request),
        Some("contrast") => contrast(&request),
        Some("nuts") => nuts(&request),
        Some("implications") => implications(&request),
        Some("prior_draws") => prior_draws(&request),
        other => Err(format!("unknown action {other:?}")),
    };
    waypath_probe::write_answer(&answer.unwrap_or_else(|e| json!({ "error": e })));
}

fn numbers(value: &Value) -> Result<Vec<f64>, String> {
    value
        .as_array()
        .ok_or("expected an array of numbers")?
        .iter()
        .map(|v| v.as_f64().ok_or_else(|| format!("{v} is not a number")))
        .collect()
}

fn column_data(value: &Value) -> Result<ColumnData, String> {
    if let Some(v) = value.get("real") {
        return Ok(ColumnData::Real(numbers(v)?));
    }
    if let Some(v) = value.get("count") {
        return Ok(ColumnData::Count(numbers(v)?.into_iter().map(|x| x as u64).collect()));
    }
    if let Some(v) = value.get("binary") {
        return Ok(ColumnData::Binary(numbers(v)?.into_iter().map(|x| x != 0.0).collect()));
    }
    let category = value.get("category").ok_or("a column needs real, count, binary or category")?;
    let codes = numbers(&category["codes"])?.into_iter().map(|x| x as u32).collect();
    let levels = category["levels"]
        .as_array()
        .ok_or("category levels must be an array")?
        .iter()
        .map(|l| l.as_str().map(str::to_string).ok_or("levels must be strings"))
        .collect::<Result<_, _>>()?;
    Ok(ColumnData::Category { codes, levels })
}

fn table(request: &Value) -> Result<Table, String> {
    let columns = request["columns"]
        .as_object()
        .ok_or("columns must be an object")?
        .iter()
        .map(|(name, v)| Ok(Column::new(name.clone(), column_data(v)?)))
        .collect::<Result<Vec<_>, String>>()?;
    Ok(Table { name: "data".into(), columns })
}

fn model(request: &Value) -> Result<Model, String> {
    let table = table(request)?;
    let text = request["model"].as_str().ok_or("model must be text")?;
    let spec = ModelSpec::from_lines("probe", text.lines().enumerate().map(|(i, l)| (i + 2, l)))
        .map_err(|e| e.to_string())?;
    Model::build(&spec, &table).map_err(|e| e.to_string())
}

fn design_rows(model: &Model) -> Value {
    let x = model.design_matrix();
    json!((0..x.nrows()).map(|i| x.row(i).iter().copied().collect::<Vec<f64>>()).collect::<Vec<_>>())
}

fn fit(request: &Value) -> Result<Value, String> {
    let model = model(request)?;
    let fit = laplace(&model, &model.unconstrained_names(), &model.initial_point(), 0, 1).map_err(|e| e.to_string())?;
    let mode = model.constrain(&fit.mode);
    let mut answer = json!({
        "names": model.parameter_names(),
        "mode": mode,
        "design": design_rows(&model),
        "notes": model.notes(),
        "family": model.family().name(),
    });
    if let Some(levels) = model.outcome_levels() {
        let rows = NewRows::from_design(model.design_matrix().clone(), None);
        answer["levels"] = json!(levels);
        answer["probabilities"] = json!(model.level_probabilities(&mode, &rows).map_err(|e| e.to_string())?);
    }
    Ok(answer)
}

fn log_likelihood(request: &Value) -> Result<Value, String> {
    let model = model(request)?;
    let params = numbers(&request["params"])?;
    let value = model.log_likelihood(&params).map_err(|e| e.to_string())?;
    Ok(json!({ "log_likelihood": value, "design": design_rows(&model), "names": model.parameter_names() }))
}

fn pointwise(request: &Value) -> Result<Value, String> {
    let model = model(request)?;
    let params = numbers(&request["params"])?;
    let values = model.pointwise_log_likelihood(&params, &model.fitted_rows()).map_err(|e| e.to_string())?;
    Ok(json!({ "log_densities": values, "names": model.parameter_names() }))
}

fn tail_fit(request: &Value) -> Result<Value, String> {
    let x = numbers(&request["x"])?;
    let fit = waypath::draws::pareto::fit_tail(&x).ok_or("no fit")?;
    let regularised = waypath::draws::pareto::weakly_regularised_shape(fit.shape, x.len());
    Ok(json!({ "shape": fit.shape, "scale": fit.scale, "regularised_shape": regularised }))
}

fn tail_functions(request: &Value) -> Result<Value, String> {
    let number = |key: &str| request[key].as_f64().ok_or_else(|| format!("{key} must be a number"));
    let fit = waypath::draws::pareto::TailFit { shape: number("shape")?, scale: number("scale")? };
    let quantiles: Vec<f64> = numbers(&request["p"])?.into_iter().map(|p| fit.quantile(p)).collect();
    let log_densities: Vec<f64> = numbers(&request["at"])?.into_iter().map(|x| fit.log_density(x)).collect();
    Ok(json!({ "quantiles": quantiles, "log_densities": log_densities }))
}

fn basis(request: &Value) -> Result<Value, String> {
    let degree = request["degree"].as_u64().ok_or("degree must be a whole number")? as usize;
    let basis = BSplineBasis::from_knots(numbers(&request["knots"])?, degree);
    let rows: Vec<Vec<f64>> = numbers(&request["x"])?.into_iter().map(|x| basis.row(x)).collect();
    Ok(json!({ "rows": rows }))
}

fn prior(request: &Value) -> Result<Value, String> {
    let prior = Prior::parse(request["prior"].as_str().ok_or("prior must be text")?).map_err(|e| e.to_string())?;
    let values: Vec<f64> = numbers(&request["x"])?.into_iter().map(|x| prior.log_density_and_derivative(x).0).collect();
    let sample: Vec<f64> = match (request["draws"].as_u64(), request["seed"].as_u64()) {
        (Some(n), Some(seed)) => {
            use waypath::rand::SeedableRng;
            let mut rng = waypath::rand::rngs::StdRng::seed_from_u64(seed);
            (0..n).map(|_| prior.sample(&mut rng)).collect()
        }
        _ => Vec::new(),
    };
    Ok(json!({ "log_density": values, "sample": sample }))
}

fn calibrate(request: &Value) -> Result<Value, String> {
    let model = model(request)?;
    let whole = |key: &str| request[key].as_u64().ok_or_else(|| format!("{key} must be a whole number"));
    let settings = NutsSettings { chains: 1, settle: 300, draws: whole("draws")? as usize, threads: 1, seed: 0, ..NutsSettings::default() };
    let c = waypath::query::calibrate(&model, whole("reps")? as usize, &Method::Nuts(settings), whole("seed")?, &AtomicBool::new(false))
        .map_err(|e| e.to_string())?;
    serde_json::to_value(&c).map_err(|e| e.to_string())
}

fn contrast(request: &Value) -> Result<Value, String> {
    let model = model(request)?;
    let table = table(request)?;
    let whole = |key: &str| request[key].as_u64().ok_or_else(|| format!("{key} must be a whole number"));
    let method = Method::Laplace { draws: whole("draws")? as usize, seed: whole("seed")? };
    let fit = waypath::infer::fit::fit_model(&model, &method, &AtomicBool::new(false), &|_| {}).map_err(|e| e.to_string())?;
    let variable = request["variable"].as_str().ok_or("variable must be text")?;
    let mut ask = waypath::query::ContrastRequest { over_rows: true, ..waypath::query::ContrastRequest::new(variable) };
    if let Some([b, a]) = request["between"].as_array().map(Vec::as_slice) {
        ask = ask.between(b.as_str().ok_or("between takes text")?, a.as_str().ok_or("between takes text")?);
    }
    ask.on = match request["on"].as_str() {
        None => waypath::query::On::Means,
        Some("scores") => waypath::query::On::Scores,
        Some("log-times") => waypath::query::On::LogTimes,
        Some("medians") => waypath::query::On::Medians,
        Some(other) => match other.split_whitespace().collect::<Vec<_>>().as_slice() {
            ["events", "by", t] => waypath::query::On::EventsBy(t.parse().map_err(|_| format!("bad time {t}"))?),
            ["quantile", q] => waypath::query::On::Quantile(q.parse().map_err(|_| format!("bad share {q}"))?),
            _ => return Err(format!("unknown scale {other}")),
        },
    };
    if let Some(mass) = request["mass"].as_f64() {
        ask.mass = mass;
    }
    if let Some(false) = request["over_rows"].as_bool() {
        ask.over_rows = false;
    }
    let contrasts = waypath::query::level_contrasts(&model, &fit.draws, &table, &ask).map_err(|e| e.to_string())?;
    let names = model.parameter_names();
    let columns: Vec<&[f64]> = names.iter().map(|n| fit.draws.get(n).ok_or("missing draws")).collect::<Result<_, _>>()?;
    let params: Vec<Vec<f64>> = (0..fit.draws.len()).map(|d| columns.iter().map(|c| c[d]).collect()).collect();
    let c = &contrasts[0];
    let mut answer = json!({ "names": names, "params": params, "to": c.to, "from": c.from, "scale": c.scale,
                             "notes": c.notes, "unit_free": !c.in_outcome_unit, "curves": c.curves });
    if c.level.is_some() {
        answer["levels"] = json!(contrasts.iter().map(|c| json!({"level": c.level, "differences": c.draws})).collect::<Vec<_>>());
    } else {
        answer["differences"] = json!(c.draws);
    }
    Ok(answer)
}

fn implications(request: &Value) -> Result<Value, String> {
    let table = table(request)?;
    let mut builder = waypath::graph::GraphBuilder::new("probe");
    for line in request["graph"].as_array().ok_or("graph must be a list of lines")? {
        builder.add_line(line.as_str().ok_or("graph lines are text")?).map_err(|e| e.to_string())?;
    }
    let graph = builder.finish().map_err(|e| e.to_string())?;
    let whole = |key: &str| request[key].as_u64().ok_or_else(|| format!("{key} must be a whole number"));
    let method = Method::Laplace { draws: whole("draws")? as usize, seed: whole("seed")? };
    let mass = request["mass"].as_f64().ok_or("mass must be a number")?;
    let report = waypath::query::check_implications(&graph, &table, &method, &AtomicBool::new(false), mass).map_err(|e| e.to_string())?;
    serde_json::to_value(&report).map_err(|e| e.to_string())
}

fn nuts(request: &Value) -> Result<Value, String> {
    let model = model(request)?;
    let whole = |key: &str| request[key].as_u64().ok_or_else(|| format!("{key} must be a whole number"));
    let settings = NutsSettings {
        chains: whole("chains")? as usize,
        settle: whole("settle")? as usize,
        draws: whole("draws")? as usize,
        seed: whole("seed")?,
        ..NutsSettings::default()
    };
    let fit = waypath::infer::fit::fit_model(&model, &Method::Nuts(settings), &AtomicBool::new(false), &|_| {})
        .map_err(|e| e.to_string())?;
    let names = model.parameter_names();
    let (mut mean, mut median, mut sd) = (Vec::new(), Vec::new(), Vec::new());
    for name in &names {
        let mut v = fit.draws.get(name).ok_or("missing draws")?.to_vec();
        let n = v.len() as f64;
        let m = v.iter().sum::<f64>() / n;
        sd.push((v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (n - 1.0)).sqrt());
        mean.push(m);
        v.sort_by(f64::total_cmp);
        median.push(v[v.len() / 2]);
    }
    let r_hat: Vec<f64> = fit.diagnostics.iter().flatten().map(|d| d.rhat).collect();
    let largest_r_hat = r_hat.iter().copied().fold(0.0_f64, f64::max);
    Ok(json!({ "names": names, "mean": mean, "median": median, "sd": sd, "divergences": fit.divergences,
               "largest_r_hat": largest_r_hat, "r_hat": r_hat }))
}

fn prior_draws(request: &Value) -> Result<Value, String> {
    use waypath::rand::SeedableRng;
    let model = model(request)?;
    let whole = |key: &str| request[key].as_u64().ok_or_else(|| format!("{key} must be a whole number"));
    let mut rng = waypath::rand::rngs::StdRng::seed_from_u64(whole("seed")?);
    let draws: Vec<Vec<f64>> = (0..whole("draws")?)
        .map(|_| waypath::query::calibrate::prior_draw(&model, &mut rng).map_err(|e| e.to_string()))
        .collect::<Result<_, _>>()?;
    Ok(json!({ "names": model.parameter_names(), "draws": draws }))
}
