//! `ask direct effect … using T varying by C`: the exposure's slope fitted
//! per level of a category of the set, the contrast averaged over rows.
//!
//! The rows are drawn here by the test's own generator: two soil kinds, the
//! exposure's spread three times as large on one, and a slope of 0.5 on
//! loam and 1.3 on sand. The truth of the over-rows contrast (one unit of
//! the exposure, every row at its own soil) is the rows' average slope,
//! 0.5 + 0.8 × (share of sand rows), counted from the generated rows. An
//! additive model pools the two slopes weighted by the exposure's spread
//! within each soil (least squares with a common slope, e.g. Wooldridge,
//! *Introductory Econometrics*, §3.2, recalled): about 1.2 here, so its
//! interval misses the truth that the varying slopes cover.

mod common;

use common::cells::{last_json, run};

use waypath::cells::Session;

#[test]
fn varying_slopes_cover_the_rows_average_slope_where_the_additive_model_misses() {
    let dir = std::env::temp_dir().join(format!("wp-ask-varying-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let mut s = common::linear_sem::Stream::new(77);
    let mut csv = String::from("soil,water,growth\n");
    let mut sand = 0;
    let rows = 2000;
    for _ in 0..rows {
        let is_sand = s.uniform() < 0.5;
        sand += usize::from(is_sand);
        let water = 0.4 * f64::from(u8::from(is_sand)) + if is_sand { 3.0 } else { 1.0 } * s.normal();
        let slope = if is_sand { 1.3 } else { 0.5 };
        let growth = 1.0 + slope * water + 0.6 * f64::from(u8::from(is_sand)) + s.normal();
        csv.push_str(&format!("{},{water:.6},{growth:.6}\n", if is_sand { "sand" } else { "loam" }));
    }
    std::fs::write(dir.join("beds.csv"), csv).unwrap();
    let truth = 0.5 + 0.8 * sand as f64 / rows as f64;
    let mut session = Session::new(&dir);
    last_json(
        &mut session,
        "table beds from \"beds.csv\":\n    soil: category(loam, sand)\n    water: real\n    growth: real\ngraph g:\n    soil -> water -> growth\n    soil -> growth",
    );
    let varying = last_json(&mut session, "ask direct effect of water on growth in g using beds varying by soil with laplace seed 3");
    assert_eq!(varying["model"].as_str().map(|m| m.starts_with("growth from water per soil, soil")), Some(true), "{varying}");
    let c = &varying["contrasts"][0];
    let (lo, hi) = (c["lower"].as_f64().unwrap(), c["upper"].as_f64().unwrap());
    assert!(lo <= truth && truth <= hi, "truth {truth} outside [{lo}, {hi}]");
    let additive = last_json(&mut session, "ask direct effect of water on growth in g using beds with laplace seed 3");
    let a = &additive["contrasts"][0];
    assert!(a["lower"].as_f64().unwrap() > truth + 0.1, "the additive slope leans to sand's: {a}");
    // Held at one soil: that soil's own slope (the simulated 1.3 on sand),
    // within a 99% interval so that one seeded draw of the data rarely fails it.
    let held = last_json(&mut session, "ask direct effect of water on growth in g using beds at soil sand varying by soil intervals 99% with laplace seed 3");
    let h = &held["contrasts"][0];
    assert!(h["lower"].as_f64().unwrap() <= 1.3 && 1.3 <= h["upper"].as_f64().unwrap(), "{h}");
    // Refusals name what is wrong.
    let out = run(&mut session, "ask direct effect of water on growth in g using beds varying by growth");
    assert!(out.error.unwrap().describe().contains("needs growth in the set"));
    let out = run(&mut session, "ask direct effect of soil on growth in g using beds varying by water");
    assert!(out.error.unwrap().describe().contains("varying by water"));
    std::fs::remove_dir_all(&dir).ok();
}
