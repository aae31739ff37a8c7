//! Identifying formulas over count, yes/no and category nodes, estimated
//! on a chain of fitted conditionals (`query::formula_levels`).
//!
//! The scenario is invented: orchard blocks on a hillside (`slope`) or not,
//! with netting or not, whose flowers are pollinated or not, giving a good
//! crop or not. Two hidden causes: the grower (behind hillside blocks and
//! netting) and late frost (behind netting and the crop). No set of
//! observed nodes adjusts for netting → crop, nor is pollination a front
//! door (the grower reaches it through the slope); the complete algorithm
//! identifies the effect with a ratio inside a sum, which only the chain
//! routes evaluate.
//!
//! Truth: the structural models are simulated here with their hidden
//! nodes, and the interventional mean is computed by enumerating every
//! configuration of the hidden and observed nodes with netting set (the
//! definition of an intervention, Pearl 2009, *Causality*, §3.2.1,
//! recalled), never through the formula.
//!
//! 1. Coverage: 30 data sets of 300 rows with random strengths, Laplace
//!    fits; the 90% interval covers the truth in Binomial(30, 0.9) of them.
//! 2. A category mediator, a count exposure and a real outcome run
//!    end to end on one larger data set.
//! 3. Bad input: a count with a huge range and categories with too many
//!    levels are refused before anything is allocated or fitted.
//! 4. The controlled direct effect by the complete algorithm over yes/no
//!    nodes: 20 data sets, the truth enumerated with the mediator set.
//! 5. A category outcome (each level's probability) and the joint model's
//!    `intervene`, each on one seeded data set against the enumeration.

mod common;

use std::path::Path;

use common::cells::{last_json, run};
use common::scratch::fresh_folder;
use common::seeded::Seeded;
use serde_json::Value;
use statrs::distribution::{Binomial, DiscreteCDF};
use waypath::cells::Session;

const GRAPH: &str = "graph g:
    slope -> pollinated
    netting -> pollinated
    pollinated -> good_crop
    slope -> good_crop
    hidden grower -> slope, netting
    hidden frost -> netting, good_crop
";

fn logistic(eta: f64) -> f64 {
    1.0 / (1.0 + (-eta).exp())
}

/// Logit-additive conditionals of the yes/no scenario.
struct Orchard {
    /// Intercept and strengths, named by the edge they carry.
    slope: [f64; 2],      // 1, grower
    netting: [f64; 3],    // 1, grower, frost
    pollinated: [f64; 3], // 1, slope, netting
    crop: [f64; 4],       // 1, pollinated, slope, frost
}

impl Orchard {
    fn random(s: &mut Seeded) -> Orchard {
        let mut w = |lo: f64, hi: f64| lo + (hi - lo) * s.uniform();
        Orchard {
            slope: [w(-0.5, 0.5), w(0.8, 1.6)],
            netting: [w(-1.2, -0.2), w(0.8, 1.6), w(0.8, 1.6)],
            pollinated: [w(-1.0, 0.0), w(0.4, 1.2), w(0.8, 1.6)],
            crop: [w(-1.0, 0.0), w(0.8, 1.6), w(-0.8, 0.8), w(-1.6, -0.8)],
        }
    }

    fn p_slope(&self, grower: f64) -> f64 {
        logistic(self.slope[0] + self.slope[1] * grower)
    }
    fn p_netting(&self, grower: f64, frost: f64) -> f64 {
        logistic(self.netting[0] + self.netting[1] * grower + self.netting[2] * frost)
    }
    fn p_pollinated(&self, slope: f64, netting: f64) -> f64 {
        logistic(self.pollinated[0] + self.pollinated[1] * slope + self.pollinated[2] * netting)
    }
    fn p_crop(&self, pollinated: f64, slope: f64, frost: f64) -> f64 {
        logistic(self.crop[0] + self.crop[1] * pollinated + self.crop[2] * slope + self.crop[3] * frost)
    }

    /// Pr[good_crop | do(netting = n)]: every configuration of grower,
    /// frost (each yes with probability ½), slope and pollinated.
    fn truth(&self, n: f64) -> f64 {
        let bern = |p: f64, v: f64| if v == 1.0 { p } else { 1.0 - p };
        let mut total = 0.0;
        for grower in [0.0, 1.0] {
            for frost in [0.0, 1.0] {
                for slope in [0.0, 1.0] {
                    for pollinated in [0.0, 1.0] {
                        let p = 0.25 * bern(self.p_slope(grower), slope) * bern(self.p_pollinated(slope, n), pollinated);
                        total += p * self.p_crop(pollinated, slope, frost);
                    }
                }
            }
        }
        total
    }

    fn rows(&self, s: &mut Seeded, n: usize) -> String {
        let mut text = String::from("slope,netting,pollinated,good_crop\n");
        let mut draw = |p: f64| f64::from(u8::from(s.uniform() < p));
        for _ in 0..n {
            let (grower, frost) = (draw(0.5), draw(0.5));
            let slope = draw(self.p_slope(grower));
            let netting = draw(self.p_netting(grower, frost));
            let pollinated = draw(self.p_pollinated(slope, netting));
            let crop = draw(self.p_crop(pollinated, slope, frost));
            text.push_str(&format!("{slope},{netting},{pollinated},{crop}\n"));
        }
        text
    }
}

fn write(dir: &Path, file: &str, text: &str) {
    std::fs::write(dir.join(file), text).unwrap();
}

fn interval(json: &Value) -> (f64, f64, String) {
    let c = &json["contrasts"][0];
    (c["lower"].as_f64().unwrap(), c["upper"].as_f64().unwrap(), c["held_how"].as_str().unwrap_or("").to_string())
}

#[test]
fn yes_no_formula_intervals_cover_the_enumerated_effect() {
    let wanted = 30;
    let dir = fresh_folder("formula-levels", "cover");
    let mut s = Seeded(0x5EED_17A0_0001);
    let (mut covered, mut missed) = (0, Vec::new());
    for k in 0..wanted {
        let orchard = Orchard::random(&mut s);
        let file = format!("blocks{k}.csv");
        write(&dir, &file, &orchard.rows(&mut s, 300));
        let mut session = Session::new(&dir);
        let declare = "    slope: binary\n    netting: binary\n    pollinated: binary\n    good_crop: binary\n";
        last_json(&mut session, &format!("table t from \"{file}\":\n{declare}{GRAPH}"));
        let json = last_json(&mut session, &format!("ask total effect of netting on good_crop in g using t with laplace seed {}", k + 1));
        assert_eq!(json["route"].as_str(), Some("complete algorithm"), "{json}");
        let (lo, hi, how) = interval(&json);
        assert!(how.contains("every combination of the levels"), "{how}");
        let truth = orchard.truth(1.0) - orchard.truth(0.0);
        if lo <= truth && truth <= hi {
            covered += 1;
        } else {
            missed.push(format!("set {k}: truth {truth:.3}, interval [{lo:.3}, {hi:.3}]"));
        }
    }
    std::fs::remove_dir_all(&dir).ok();
    eprintln!("{covered} of {wanted} intervals covered\n{}", missed.join("\n"));
    // 23 or more of 30 with probability above 0.98 (statrs) when calibrated.
    let at_least = 1.0 - Binomial::new(0.9, wanted as u64).unwrap().cdf(22);
    assert!(at_least > 0.98, "{at_least}");
    assert!(covered >= 23, "{covered} of {wanted} intervals covered the truth; missed:\n{}", missed.join("\n"));
}

/// Pollination as a category (none, some, full: softmax against none),
/// nets per block a count (poisson), and the crop in tonnes (normal).
struct Mixed;

impl Mixed {
    fn p_slope(grower: f64) -> f64 {
        logistic(-0.2 + 1.2 * grower)
    }
    fn net_rate(grower: f64, frost: f64) -> f64 {
        (0.2 + 0.6 * grower + 0.5 * frost).exp()
    }
    /// Probabilities of none, some, full.
    fn pollinated(slope: f64, nets: f64) -> [f64; 3] {
        let some = (-0.3 + 0.5 * slope + 0.4 * nets).exp();
        let full = (-1.0 + 0.8 * slope + 0.6 * nets).exp();
        let total = 1.0 + some + full;
        [1.0 / total, some / total, full / total]
    }
    fn crop_mean(pollinated: usize, slope: f64, frost: f64) -> f64 {
        4.0 + [0.0, 1.0, 2.5][pollinated] - 0.5 * slope - 1.5 * frost
    }

    fn truth(nets: f64) -> f64 {
        let mut total = 0.0;
        for grower in [0.0, 1.0] {
            for frost in [0.0, 1.0] {
                for slope in [0.0, 1.0] {
                    let ps = if slope == 1.0 { Mixed::p_slope(grower) } else { 1.0 - Mixed::p_slope(grower) };
                    for (level, pp) in Mixed::pollinated(slope, nets).iter().enumerate() {
                        total += 0.25 * ps * pp * Mixed::crop_mean(level, slope, frost);
                    }
                }
            }
        }
        total
    }

    fn rows(s: &mut Seeded, n: usize) -> String {
        let mut text = String::from("slope,netting,pollinated,good_crop\n");
        for _ in 0..n {
            let grower = f64::from(u8::from(s.uniform() < 0.5));
            let frost = f64::from(u8::from(s.uniform() < 0.5));
            let slope = f64::from(u8::from(s.uniform() < Mixed::p_slope(grower)));
            // Poisson by inversion.
            let rate = Mixed::net_rate(grower, frost);
            let (mut nets, mut p, u) = (0u32, (-rate).exp(), s.uniform());
            let mut cdf = p;
            while u > cdf {
                nets += 1;
                p *= rate / f64::from(nets);
                cdf += p;
            }
            let shares = Mixed::pollinated(slope, f64::from(nets));
            let u = s.uniform();
            let level = if u < shares[0] { 0 } else if u < shares[0] + shares[1] { 1 } else { 2 };
            let crop = Mixed::crop_mean(level, slope, frost) + 0.8 * s.normal();
            text.push_str(&format!("{slope},{nets},{},{crop:.4}\n", ["none", "some", "full"][level]));
        }
        text
    }
}

#[test]
fn a_category_mediator_a_count_exposure_and_a_real_outcome_run_end_to_end() {
    let dir = fresh_folder("formula-levels", "mixed");
    write(&dir, "mixed.csv", &Mixed::rows(&mut Seeded(0x5EED_17A0_0002), 1500));
    let mut session = Session::new(&dir);
    let declare = "    slope: binary\n    netting: count\n    pollinated: category(none, some, full)\n    good_crop: real\n";
    last_json(&mut session, &format!("table t from \"mixed.csv\":\n{declare}{GRAPH}"));
    let json = last_json(&mut session, "ask total effect of netting on good_crop in g using t with laplace seed 5");
    std::fs::remove_dir_all(&dir).ok();
    let (lo, hi, how) = interval(&json);
    assert!(how.contains("every combination of the levels") && how.contains("netting enumerated to"), "{how}");
    let c = &json["contrasts"][0];
    let (to, from) = (c["to"].as_str().unwrap().parse::<f64>().unwrap(), c["from"].as_str().unwrap().parse::<f64>().unwrap());
    assert_eq!(to, from + 1.0, "a count is compared one above its rounded mean");
    let truth = Mixed::truth(to) - Mixed::truth(from);
    eprintln!("truth {truth:.4}, interval [{lo:.4}, {hi:.4}]; {how}");
    // One data set: a single seeded check, not a coverage rate.
    assert!(lo <= truth && truth <= hi, "truth {truth:.3}, interval [{lo:.3}, {hi:.3}]");
    assert!(hi - lo < 0.5, "the interval [{lo:.3}, {hi:.3}] is too wide to say anything");
}

#[test]
fn a_huge_count_or_too_many_levels_is_refused_before_fitting() {
    let dir = fresh_folder("formula-levels", "huge");
    // A count whose largest value makes its range alone too large to enumerate.
    write(&dir, "huge.csv", "slope,netting,pollinated,good_crop\n0,3,0,1\n1,400000000000,1,0\n1,2,1,1\n0,0,0,0\n");
    let mut session = Session::new(&dir);
    let declare = "    slope: binary\n    netting: count\n    pollinated: binary\n    good_crop: binary\n";
    last_json(&mut session, &format!("table t from \"huge.csv\":\n{declare}{GRAPH}"));
    let json = last_json(&mut session, "ask total effect of netting on good_crop in g using t");
    let why = json["why"].to_string();
    assert!(why.contains("netting (400003794745 values)") && why.contains("would need about") && why.contains("nothing was fitted"), "{why}");
    assert!(json["contrasts"].as_array().is_none_or(Vec::is_empty), "{json}");
    // Categories of many levels each: their combinations are refused the same way.
    let mut text = String::from("slope,netting,pollinated,good_crop\n");
    for i in 0..30_000 {
        text.push_str(&format!("s{},n{},{},{}\n", i % 3000, (i * 7) % 3000, i % 2, (i / 2) % 2));
    }
    write(&dir, "wide.csv", &text);
    let out = run(&mut session, &format!("table w from \"wide.csv\":\n    pollinated: binary\n    good_crop: binary\n{}", GRAPH.replace("graph g", "graph h")));
    assert!(out.error.is_none(), "{:?}", out.error.map(|e| e.describe()));
    let json = last_json(&mut session, "ask total effect of netting on good_crop in h using w");
    std::fs::remove_dir_all(&dir).ok();
    let why = json["why"].to_string();
    assert!(why.contains("slope (3000 values)") && why.contains("would need about"), "{why}");
}

/// The controlled direct effect of netting on the crop with fungus held:
/// netting → wet_canopy → fungus → good_crop, netting → good_crop, and a
/// hidden soil behind the wet canopy and the crop. No single-door set
/// exists (a set that blocks the path through the canopy opens
/// netting → wet_canopy ← soil → good_crop); the complete algorithm
/// identifies Pr[good_crop | do(netting, fungus)].
struct Direct {
    canopy: [f64; 3], // 1, netting, soil
    fungus: [f64; 2], // 1, wet_canopy
    crop: [f64; 4],   // 1, netting, fungus, soil
}

impl Direct {
    fn random(s: &mut Seeded) -> Direct {
        let mut w = |lo: f64, hi: f64| lo + (hi - lo) * s.uniform();
        Direct {
            canopy: [w(-0.8, 0.0), w(0.8, 1.6), w(0.8, 1.6)],
            fungus: [w(-0.8, 0.0), w(0.8, 1.6)],
            crop: [w(-0.5, 0.5), w(0.4, 1.2), w(-1.6, -0.8), w(0.8, 1.6)],
        }
    }

    /// Pr[good_crop | do(netting = n, fungus = f)]: soil yes with ½.
    fn truth(&self, n: f64, f: f64) -> f64 {
        [0.0, 1.0].iter().map(|soil| 0.5 * logistic(self.crop[0] + self.crop[1] * n + self.crop[2] * f + self.crop[3] * soil)).sum()
    }

    fn rows(&self, s: &mut Seeded, n: usize) -> String {
        let mut text = String::from("netting,wet_canopy,fungus,good_crop\n");
        let mut draw = |p: f64| f64::from(u8::from(s.uniform() < p));
        for _ in 0..n {
            let (soil, netting) = (draw(0.5), draw(0.5));
            let canopy = draw(logistic(self.canopy[0] + self.canopy[1] * netting + self.canopy[2] * soil));
            let fungus = draw(logistic(self.fungus[0] + self.fungus[1] * canopy));
            let crop = draw(logistic(self.crop[0] + self.crop[1] * netting + self.crop[2] * fungus + self.crop[3] * soil));
            text.push_str(&format!("{netting},{canopy},{fungus},{crop}\n"));
        }
        text
    }
}

#[test]
fn yes_no_controlled_direct_effect_intervals_cover_the_enumerated_effect() {
    let wanted = 20;
    let dir = fresh_folder("formula-levels", "direct");
    let mut s = Seeded(0x5EED_17A0_0003);
    let (mut covered, mut missed) = (0, Vec::new());
    let graph = "graph g:\n    netting -> wet_canopy -> fungus -> good_crop\n    netting -> good_crop\n    hidden soil -> wet_canopy, good_crop\n";
    let declare = "    netting: binary\n    wet_canopy: binary\n    fungus: binary\n    good_crop: binary\n";
    for k in 0..wanted {
        let model = Direct::random(&mut s);
        let file = format!("direct{k}.csv");
        write(&dir, &file, &model.rows(&mut s, 300));
        let mut session = Session::new(&dir);
        last_json(&mut session, &format!("table t from \"{file}\":\n{declare}{graph}"));
        let held = k % 2;
        let json = last_json(&mut session, &format!("ask direct effect of netting on good_crop in g using t at fungus {held} with laplace seed {}", k + 1));
        assert_eq!(json["route"].as_str(), Some(waypath::query::DIRECT_FORMULA_ROUTE), "{json}");
        assert!(json["estimand"].as_str().unwrap().contains("over every combination of the levels"), "{json}");
        let (lo, hi, _) = interval(&json);
        let truth = model.truth(1.0, held as f64) - model.truth(0.0, held as f64);
        if lo <= truth && truth <= hi {
            covered += 1;
        } else {
            missed.push(format!("set {k}: truth {truth:.3}, interval [{lo:.3}, {hi:.3}]"));
        }
    }
    std::fs::remove_dir_all(&dir).ok();
    eprintln!("{covered} of {wanted} intervals covered\n{}", missed.join("\n"));
    // 15 or more of 20 with probability above 0.98 (statrs) when calibrated.
    let at_least = 1.0 - Binomial::new(0.9, wanted as u64).unwrap().cdf(14);
    assert!(at_least > 0.98, "{at_least}");
    assert!(covered >= 15, "{covered} of {wanted} intervals covered the truth; missed:\n{}", missed.join("\n"));
}

/// The yes/no orchard with the crop graded poor, fair or good (softmax
/// against poor on pollination, slope and frost).
fn crop_shares(pollinated: f64, slope: f64, frost: f64) -> [f64; 3] {
    let fair = (0.2 + 0.8 * pollinated - 0.3 * slope - 0.9 * frost).exp();
    let good = (-0.4 + 1.5 * pollinated + 0.2 * slope - 1.4 * frost).exp();
    let total = 1.0 + fair + good;
    [1.0 / total, fair / total, good / total]
}

#[test]
fn a_category_outcome_compares_each_level_probability() {
    let orchard = Orchard { slope: [0.0, 1.2], netting: [-0.6, 1.2, 1.2], pollinated: [-0.5, 0.8, 1.2], crop: [0.0; 4] };
    // Truth: Pr[crop = level | do(netting = n)] by enumeration.
    let truth = |n: f64| {
        let bern = |p: f64, v: f64| if v == 1.0 { p } else { 1.0 - p };
        let mut out = [0.0; 3];
        for grower in [0.0, 1.0] {
            for frost in [0.0, 1.0] {
                for slope in [0.0, 1.0] {
                    for pollinated in [0.0, 1.0] {
                        let p = 0.25 * bern(orchard.p_slope(grower), slope) * bern(orchard.p_pollinated(slope, n), pollinated);
                        crop_shares(pollinated, slope, frost).iter().enumerate().for_each(|(k, s)| out[k] += p * s);
                    }
                }
            }
        }
        out
    };
    let mut s = Seeded(0x5EED_17A0_0004);
    let mut text = String::from("slope,netting,pollinated,crop\n");
    let draw = |p: f64, s: &mut Seeded| f64::from(u8::from(s.uniform() < p));
    for _ in 0..1500 {
        let (grower, frost) = (draw(0.5, &mut s), draw(0.5, &mut s));
        let slope = draw(orchard.p_slope(grower), &mut s);
        let netting = draw(orchard.p_netting(grower, frost), &mut s);
        let pollinated = draw(orchard.p_pollinated(slope, netting), &mut s);
        let shares = crop_shares(pollinated, slope, frost);
        let u = s.uniform();
        let level = if u < shares[0] { "poor" } else if u < shares[0] + shares[1] { "fair" } else { "good" };
        text.push_str(&format!("{slope},{netting},{pollinated},{level}\n"));
    }
    let dir = fresh_folder("formula-levels", "graded");
    write(&dir, "crops.csv", &text);
    let mut session = Session::new(&dir);
    let declare = "    slope: binary\n    netting: binary\n    pollinated: binary\n    crop: category(poor, fair, good)\n";
    last_json(&mut session, &format!("table t from \"crops.csv\":\n{declare}{}", GRAPH.replace("good_crop", "crop")));
    let json = last_json(&mut session, "ask total effect of netting on crop in g using t with laplace seed 9");
    std::fs::remove_dir_all(&dir).ok();
    assert!(json["estimand"].as_str().unwrap().contains("probability of each level of crop"), "{json}");
    let contrasts = json["contrasts"].as_array().unwrap();
    assert_eq!(contrasts.len(), 3, "{json}");
    let (to, from) = (truth(1.0), truth(0.0));
    let mut sum_of_means = 0.0;
    for (k, c) in contrasts.iter().enumerate() {
        assert_eq!(c["level"].as_str(), Some(["poor", "fair", "good"][k]), "{c}");
        let (lo, hi, mean) = (c["lower"].as_f64().unwrap(), c["upper"].as_f64().unwrap(), c["mean"].as_f64().unwrap());
        let change = to[k] - from[k];
        eprintln!("crop {}: truth {change:.4}, interval [{lo:.4}, {hi:.4}]", c["level"]);
        // One data set: a single seeded check per level, not a coverage rate.
        assert!(lo <= change && change <= hi, "level {k}: truth {change:.3}, interval [{lo:.3}, {hi:.3}]");
        sum_of_means += mean;
    }
    // The level probabilities add to 1 under each setting, so their changes add to 0.
    assert!(sum_of_means.abs() < 1e-9, "{sum_of_means}");
}

#[test]
fn intervene_takes_the_chain_over_levels_where_hidden_causes_touch() {
    let orchard = Orchard { slope: [0.0, 1.2], netting: [-0.6, 1.2, 1.2], pollinated: [-0.5, 0.8, 1.2], crop: [-0.5, 1.2, 0.3, -1.2] };
    let dir = fresh_folder("formula-levels", "intervene");
    write(&dir, "blocks.csv", &orchard.rows(&mut Seeded(0x5EED_17A0_0005), 1500));
    let mut session = Session::new(&dir);
    let declare = "    slope: binary\n    netting: binary\n    pollinated: binary\n    good_crop: binary\n";
    last_json(&mut session, &format!("table t from \"blocks.csv\":\n{declare}{GRAPH}"));
    last_json(&mut session, "joint j = g using t\nfit j with laplace seed 4");
    let json = last_json(&mut session, "intervene j: set netting 1 vs 0, watch good_crop seed 4");
    std::fs::remove_dir_all(&dir).ok();
    assert_eq!(json["route"].as_str(), Some("identifying formula"), "{json}");
    let w = &json["watched"][0];
    let (lo, hi) = (w["lower"].as_f64().unwrap(), w["upper"].as_f64().unwrap());
    let truth = orchard.truth(1.0) - orchard.truth(0.0);
    eprintln!("intervene: truth {truth:.4}, interval [{lo:.4}, {hi:.4}]");
    // One data set: a single seeded check, not a coverage rate.
    assert!(lo <= truth && truth <= hi, "truth {truth:.3}, interval [{lo:.3}, {hi:.3}]");
}
