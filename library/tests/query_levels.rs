//! A category node with parents in a joint model: fitted with the levels
//! family (softmax regression), and drawn level by level when an
//! intervention simulates it, so that its level shares and the nodes it
//! causes move as the true mechanism says.
//!
//! Data: invented saplings made here with a seeded generator. Soil (loam,
//! sand, peat) and canopy shade (0–1) set the growth form (herb, shrub,
//! tree) through known softmax coefficients; the form and shade set the
//! height. The truth under do(soil = s) is the g-formula written out by
//! hand (Robins 1986; recalled): the mean over the rows' own shade of the
//! softmax probabilities at soil s, and for height the same mean of
//! Σₖ pₖ · (mean height of form k).

use std::sync::atomic::AtomicBool;

use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use rand_distr::{Distribution, Normal};
use waypath::graph::{Graph, GraphBuilder};
use waypath::infer::fit::Method;
use waypath::model::Family;
use waypath::query::{build_joint, fit_joint, intervene, InterventionRequest, NodeModel};
use waypath::table::{Column, ColumnData, Table};

const SOILS: [&str; 3] = ["loam", "sand", "peat"];
const FORMS: [&str; 3] = ["herb", "shrub", "tree"];
/// Log odds of shrub and of tree against herb: intercept, sand, peat, shade.
const SHRUB: [f64; 4] = [-0.2, 0.9, -0.4, 1.5];
const TREE: [f64; 4] = [0.3, -1.5, 0.8, -2.0];
/// Mean height (cm) of each form at no shade, and the change per unit shade.
const HEIGHT: [f64; 3] = [10.0, 30.0, 90.0];
const HEIGHT_PER_SHADE: f64 = 4.0;
const ROWS: usize = 2000;

/// The true probabilities of herb, shrub and tree at soil `soil` and `shade`.
fn true_probabilities(soil: usize, shade: f64) -> [f64; 3] {
    let eta = |b: &[f64; 4]| b[0] + b[1] * f64::from(u8::from(soil == 1)) + b[2] * f64::from(u8::from(soil == 2)) + b[3] * shade;
    let e = [1.0, eta(&SHRUB).exp(), eta(&TREE).exp()];
    let total: f64 = e.iter().sum();
    [e[0] / total, e[1] / total, e[2] / total]
}

fn saplings(seed: u64) -> Table {
    let mut rng = StdRng::seed_from_u64(seed);
    let noise = Normal::new(0.0, 3.0).expect("valid normal");
    let (mut soil, mut shade, mut form, mut height) = (Vec::new(), Vec::new(), Vec::new(), Vec::new());
    for _ in 0..ROWS {
        let s = rng.random_range(0..3usize);
        let z: f64 = rng.random_range(0.0..1.0);
        let p = true_probabilities(s, z);
        let u: f64 = rng.random();
        let f = if u < p[0] { 0 } else if u < p[0] + p[1] { 1 } else { 2 };
        soil.push(s as u32);
        shade.push(z);
        form.push(f as u32);
        height.push(HEIGHT[f] + HEIGHT_PER_SHADE * z + noise.sample(&mut rng));
    }
    let labels = |l: &[&str]| l.iter().map(|s| s.to_string()).collect::<Vec<_>>();
    Table {
        name: "saplings".into(),
        columns: vec![
            Column::new("soil", ColumnData::Category { codes: soil, levels: labels(&SOILS) }),
            Column::new("shade", ColumnData::Real(shade)),
            Column::new("form", ColumnData::Category { codes: form, levels: labels(&FORMS) }),
            Column::new("height", ColumnData::Real(height)),
        ],
    }
}

fn graph() -> Graph {
    let mut b = GraphBuilder::new("nursery");
    for line in ["soil -> form", "shade -> form -> height", "shade -> height"] {
        b.add_line(line).expect("graph line");
    }
    b.finish().expect("graph")
}

/// The g-formula truth under do(soil = `soil`) over the table's rows: the
/// share of each form, and the mean height.
fn truth_under(table: &Table, soil: usize) -> ([f64; 3], f64) {
    let shade = table.column("shade").and_then(|c| c.data.as_reals()).expect("shade");
    let mut shares = [0.0; 3];
    let mut height = 0.0;
    for &z in &shade {
        let p = true_probabilities(soil, z);
        for k in 0..3 {
            shares[k] += p[k] / shade.len() as f64;
            height += p[k] * HEIGHT[k] / shade.len() as f64;
        }
        height += HEIGHT_PER_SHADE * z / shade.len() as f64;
    }
    (shares, height)
}

#[test]
fn intervention_moves_level_shares_as_the_softmax_truth_says() {
    let table = saplings(31);
    let joint = build_joint("whole", &graph(), &table, &[]).expect("joint");
    let form = joint.node("form").expect("form node");
    let NodeModel::Regression { text, model } = &form.model else { panic!("form must be a regression, not {:?}", form.model) };
    assert_eq!(model.family(), &Family::Levels);
    assert!(text.contains("family levels"), "{text}");

    let fit = fit_joint(&joint, &Method::Laplace { draws: 400, seed: 5 }, &AtomicBool::new(false)).expect("fit");
    let request = InterventionRequest {
        variable: "soil".into(),
        to: "sand".into(),
        from: "loam".into(),
        watch: vec!["form".into(), "height".into()],
        rows: None,
        seed: 8,
        mass: 0.9,
        groups: waypath::query::GroupQuestion::Observed,
    };
    let result = intervene(&joint, &fit, &table, &request).expect("intervene");
    assert_eq!(result.simulated, ["form", "height"]);
    let (sand, sand_height) = truth_under(&table, 1);
    let (loam, loam_height) = truth_under(&table, 0);

    // One watched row per form, then height.
    let levels: Vec<Option<&str>> = result.watched.iter().map(|w| w.level.as_deref()).collect();
    assert_eq!(levels, [Some("herb"), Some("shrub"), Some("tree"), None]);
    // Tolerance for a share under one setting: the posterior rests on the
    // ~667 rows of that soil, whose binomial standard error is at most
    // √(0.25/667) ≈ 0.019; 0.06 is three of them.
    for (k, w) in result.watched[..3].iter().enumerate() {
        assert!((w.mean_under_to - sand[k]).abs() < 0.06, "{}: {} vs truth {}", w.label(), w.mean_under_to, sand[k]);
        assert!((w.mean_under_from - loam[k]).abs() < 0.06, "{}: {} vs truth {}", w.label(), w.mean_under_from, loam[k]);
        let sd = (w.upper - w.lower) / (2.0 * 1.645);
        let change = sand[k] - loam[k];
        assert!((w.mean - change).abs() < 3.0 * sd, "{}: change {} vs truth {change} (sd {sd})", w.label(), w.mean);
    }
    // Height is caused by form only: its change follows the drawn levels.
    let h = &result.watched[3];
    let sd = (h.upper - h.lower) / (2.0 * 1.645);
    let change = sand_height - loam_height;
    assert!((h.mean - change).abs() < 3.0 * sd, "height change {} vs truth {change} (sd {sd})", h.mean);
    assert!(change.abs() > 4.0 * sd, "the check must be able to tell the change from zero: {change} vs sd {sd}");
}

/// The former limit: a category node with parents that an intervention on
/// one of its parents must simulate (rain → soil_class → crop). Source: the
/// mechanism `crop = 10 + 0.1·rain + 2·[soil_class = loam] + e` gives, under
/// do(soil_class = loam) vs do(clay), a change of exactly 2 in crop.
#[test]
fn intervention_through_a_category_with_parents_runs_and_setting_it_gives_the_mechanism() {
    let mut rng = StdRng::seed_from_u64(6);
    let noise = Normal::new(0.0, 1.0).expect("valid normal");
    let (mut rain, mut soil, mut crop) = (Vec::new(), Vec::new(), Vec::new());
    for _ in 0..300 {
        let r: f64 = 50.0 + 10.0 * noise.sample(&mut rng);
        let p_loam = 1.0 / (1.0 + (-(0.08 * (r - 50.0))).exp());
        let loam = rng.random::<f64>() < p_loam;
        rain.push(r);
        soil.push(u32::from(loam));
        crop.push(10.0 + 0.1 * r + 2.0 * f64::from(u8::from(loam)) + noise.sample(&mut rng));
    }
    let table = Table {
        name: "field".into(),
        columns: vec![
            Column::new("rain", ColumnData::Real(rain)),
            Column::new("soil_class", ColumnData::Category { codes: soil, levels: vec!["clay".into(), "loam".into()] }),
            Column::new("crop", ColumnData::Real(crop)),
        ],
    };
    let mut b = GraphBuilder::new("farm");
    for line in ["rain -> soil_class -> crop", "rain -> crop"] {
        b.add_line(line).expect("graph line");
    }
    let g = b.finish().expect("graph");
    let joint = build_joint("whole", &g, &table, &[]).expect("joint");
    assert!(matches!(&joint.nodes[1].model, NodeModel::Regression { model, .. } if model.family() == &Family::Levels));
    let fit = fit_joint(&joint, &Method::Laplace { draws: 300, seed: 1 }, &AtomicBool::new(false)).expect("fit");
    let request = |variable: &str, to: &str, from: &str| InterventionRequest {
        variable: variable.into(),
        to: to.into(),
        from: from.into(),
        watch: vec!["crop".into()],
        rows: None,
        seed: 1,
        mass: 0.9,
        groups: waypath::query::GroupQuestion::Observed,
    };
    let through = intervene(&joint, &fit, &table, &request("rain", "60", "50")).expect("rain simulates soil_class");
    assert_eq!(through.simulated, ["soil_class", "crop"]);
    // Rain set to 60 vs 50 in every row: 0.1 × 10 = 1 directly, plus 2 × the
    // rise in the loam share, logistic(0.08 × 10) − logistic(0) (algebra).
    let truth = 1.0 + 2.0 * (1.0 / (1.0 + (-0.8f64).exp()) - 0.5);
    let w = &through.watched[0];
    let sd = (w.upper - w.lower) / (2.0 * 1.645);
    assert!((w.mean - truth).abs() < 4.0 * sd, "{} vs truth {truth} (sd {sd})", w.mean);
    let set = intervene(&joint, &fit, &table, &request("soil_class", "loam", "clay")).expect("intervene");
    let w = &set.watched[0];
    let sd = (w.upper - w.lower) / (2.0 * 1.645);
    assert!((w.mean - 2.0).abs() < 4.0 * sd, "{}", w.mean);
}

/// Saplings where shade depends on soil (sand rows are shadier), so that
/// the crude difference in level shares between soils is not the effect of
/// soil: the form still follows [`true_probabilities`].
fn shaded_saplings(seed: u64) -> Table {
    let mut rng = StdRng::seed_from_u64(seed);
    let (mut soil, mut shade, mut form) = (Vec::new(), Vec::new(), Vec::new());
    for _ in 0..ROWS {
        let s = rng.random_range(0..3usize);
        let u: f64 = rng.random_range(0.0..1.0);
        let z = if s == 1 { u.powf(0.25) } else { u * u };
        let p = true_probabilities(s, z);
        let v: f64 = rng.random();
        form.push(if v < p[0] { 0 } else if v < p[0] + p[1] { 1 } else { 2 });
        soil.push(s as u32);
        shade.push(z);
    }
    let labels = |l: &[&str]| l.iter().map(|s| s.to_string()).collect::<Vec<_>>();
    Table {
        name: "shaded".into(),
        columns: vec![
            Column::new("soil", ColumnData::Category { codes: soil, levels: labels(&SOILS) }),
            Column::new("shade", ColumnData::Real(shade)),
            Column::new("form", ColumnData::Category { codes: form, levels: labels(&FORMS) }),
        ],
    }
}

/// `contrast … over rows` of a category outcome: one contrast per level,
/// each the change in that level's probability averaged over the rows'
/// own shade — the g-formula by standardisation (Robins 1986; recalled),
/// computed here from the true softmax mechanism, not from the fit. The
/// crude difference of shares between sand and loam rows is confounded by
/// shade and must lie outside the intervals for some level, so the check
/// can fail. On outcomes, each draw's changes across levels sum to zero.
#[test]
fn level_contrasts_over_rows_follow_the_g_formula_truth() {
    use waypath::model::{Model, ModelSpec};
    use waypath::query::{level_contrasts, ContrastRequest, On};
    let table = shaded_saplings(12);
    let spec = ModelSpec::from_lines("m", [(1, "form from soil, shade using shaded")].into_iter()).expect("spec");
    let model = Model::build(&spec, &table).expect("model");
    assert_eq!(model.family(), &Family::Levels);
    let fit = waypath::infer::fit::fit_model(&model, &Method::Laplace { draws: 600, seed: 3 }, &AtomicBool::new(false), &|_| {})
        .expect("fit");
    let request = ContrastRequest { over_rows: true, mass: 0.9, ..ContrastRequest::new("soil") }.between("sand", "loam");
    let contrasts = level_contrasts(&model, &fit.draws, &table, &request).expect("contrasts");
    let (sand, _) = truth_under(&table, 1);
    let (loam, _) = truth_under(&table, 0);
    let ColumnData::Category { codes: soils, .. } = &table.column("soil").expect("soil").data else { panic!("soil is a category") };
    let ColumnData::Category { codes: forms, .. } = &table.column("form").expect("form").data else { panic!("form is a category") };
    let crude_share = |s: u32, k: u32| {
        let at: Vec<u32> = soils.iter().zip(forms).filter(|(a, _)| **a == s).map(|(_, f)| *f).collect();
        at.iter().filter(|f| **f == k).count() as f64 / at.len() as f64
    };
    let mut crude_outside = false;
    assert_eq!(contrasts.len(), 3);
    for (k, c) in contrasts.iter().enumerate() {
        assert_eq!(c.level.as_deref(), Some(FORMS[k]));
        let truth = sand[k] - loam[k];
        let sd = (c.upper - c.lower) / (2.0 * 1.645);
        assert!((c.mean - truth).abs() < 3.0 * sd, "{}: {} vs truth {truth} (sd {sd})", c.contrast, c.mean);
        let crude = crude_share(1, k as u32) - crude_share(0, k as u32);
        crude_outside |= crude < c.lower || crude > c.upper;
    }
    assert!(crude_outside, "the confounded crude difference must differ from the adjusted one for some level");

    let simulated = ContrastRequest { on: On::Outcomes { seed: 4 }, ..request };
    let outcomes = level_contrasts(&model, &fit.draws, &table, &simulated).expect("contrasts on outcomes");
    for d in 0..outcomes[0].draws.len() {
        let total: f64 = outcomes.iter().map(|c| c.draws[d]).sum();
        assert_eq!(total, 0.0, "draw {d}: one unit's level moves from one level to another");
    }
}
