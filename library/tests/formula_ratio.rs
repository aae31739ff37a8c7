//! The Bayesian estimate of an effect whose identifying formula is a
//! ratio: the napkin graph (Pearl & Mackenzie 2018, The Book of Why, ch. 7,
//! recalled), w -> z -> x -> y with hidden causes of w and x and of w and y,
//! where `Pr[y | do(x)] = sum_w Pr[x, y | z, w] Pr[w] / sum_w Pr[x | z, w] Pr[w]`
//! at any z.
//!
//! The rows come from linear-Gaussian napkins simulated here, outside the
//! library (`common::linear_sem`: seeded xorshift, Box–Muller normals),
//! with coefficients drawn per model; the true effect is the one directed
//! path x -> y (Wright 1934, path tracing). A calibrated 90% interval
//! covers it in Binomial(K, 0.9) of K models.

mod common;

use common::cells::run;

use serde_json::Value;
use statrs::distribution::{Binomial, DiscreteCDF};
use waypath::cells::Session;

use common::linear_sem::{write_csv, Sem, Stream, NODES};

fn last_json(session: &mut Session, cell: &str) -> Value {
    let out = run(session, cell);
    assert!(out.error.is_none(), "{cell}\n{}", out.error.map(|e| e.describe()).unwrap_or_default());
    out.displays.last().and_then(|d| d.json.clone()).expect("a JSON structure")
}

/// A napkin over v0 = w, v1 = z, v2 = x, v3 = y (v4 stands apart), each
/// coefficient 0.5 to 1 in size with a random sign.
fn napkin(s: &mut Stream) -> Sem {
    let mut coefficient = || (0.5 + 0.5 * s.uniform()) * if s.uniform() < 0.5 { -1.0 } else { 1.0 };
    Sem {
        edges: vec![(0, 1, coefficient()), (1, 2, coefficient()), (2, 3, coefficient())],
        hidden: vec![[(0, coefficient()), (2, coefficient())], [(0, coefficient()), (3, coefficient())]],
    }
}

#[test]
fn napkin_ratio_intervals_cover_the_path_traced_effect() {
    let wanted = 30;
    let dir = std::env::temp_dir().join(format!("wp-formula-ratio-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let declare: String = (0..NODES).map(|i| format!("    v{i}: real\n")).collect();
    let mut covered = 0;
    let mut missed = Vec::new();
    for seed in 1..=wanted as u64 {
        let sem = napkin(&mut Stream::new(seed));
        let rows = sem.rows(&mut Stream::new(seed + 7_000_001), 500);
        let file = format!("napkin{seed}.csv");
        write_csv(&dir, &file, &rows);
        let mut session = Session::new(&dir);
        last_json(&mut session, &format!("table t from \"{file}\":\n{declare}{}", sem.graph_text()));
        let json = last_json(&mut session, &format!("ask total effect of v2 on v3 in g using t with laplace seed {seed}"));
        assert_eq!(json["route"].as_str(), Some("complete algorithm"), "{json}");
        assert!(json["beyond_adjustment"]["formula_text"].as_str().unwrap().contains('÷'), "{json}");
        let c = &json["contrasts"][0];
        assert!(c["held_how"].as_str().unwrap().contains("weighted by the fitted density of v2 as set"), "{c}");
        let (lo, hi) = (c["lower"].as_f64().unwrap(), c["upper"].as_f64().unwrap());
        let truth = sem.total_effect(2, 3);
        if lo <= truth && truth <= hi {
            covered += 1;
        } else {
            missed.push(format!("seed {seed}: truth {truth:.3}, interval [{lo:.3}, {hi:.3}]"));
        }
    }
    std::fs::remove_dir_all(&dir).ok();
    eprintln!("{covered} of {wanted} intervals covered\n{}", missed.join("\n"));
    // 23 or more of 30 with probability above 0.98 (statrs) when calibrated.
    let at_least_23 = 1.0 - Binomial::new(0.9, wanted as u64).unwrap().cdf(22);
    assert!(at_least_23 > 0.98, "{at_least_23}");
    assert!(covered >= 23, "{covered} of {wanted} intervals covered the truth; missed:\n{}", missed.join("\n"));
}
