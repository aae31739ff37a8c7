//! `intervene` on a joint model whose graph has hidden common causes
//! touching what it simulates: the watched node's change comes from its
//! identifying formula, or the intervention is refused with the hedge.
//!
//! The data come from the test's own simulator (`common::linear_sem`):
//! random linear-Gaussian models with hidden standard normal causes. The
//! truth of setting x to 1 against 0 is the path-traced total effect
//! (Wright 1934). A calibrated 90% interval covers it in Binomial(K, 0.9)
//! of K models (statrs gives the bound). A refusal must name a hedge, and
//! the hedge's defining property is checked on the graph the test wrote:
//! the hidden causes it names have children in both of its sets.

mod common;

use common::cells::{last_json, run};

use statrs::distribution::{Binomial, DiscreteCDF};
use waypath::cells::{CellOutcome, Session};

use common::linear_sem::{write_csv, Sem, Stream, NODES};

/// Whether a hidden cause of `sem` has a child on a directed path from `x`
/// to `y` (x excluded): the nodes a simulation of do(x) must draw. Written
/// from the test's own edge list.
fn hidden_touches_the_path(sem: &Sem, x: usize, y: usize) -> bool {
    let mut from_x = [false; NODES];
    from_x[x] = true;
    for j in x + 1..NODES {
        from_x[j] = sem.edges.iter().any(|(i, k, _)| *k == j && from_x[*i]);
    }
    let mut to_y = [false; NODES];
    to_y[y] = true;
    for i in (0..y).rev() {
        to_y[i] = sem.edges.iter().any(|(a, k, _)| *a == i && to_y[*k]);
    }
    sem.hidden.iter().any(|pair| pair.iter().any(|(c, _)| *c != x && from_x[*c] && to_y[*c]))
}

/// One case: fit the joint model on simulated rows and set x to 1 vs 0.
fn intervene_case(dir: &std::path::Path, seed: u64, x: usize, y: usize) -> CellOutcome {
    let sem = Sem::random(&mut Stream::new(seed));
    let rows = sem.rows(&mut Stream::new(seed + 7_000_001), 500);
    let file = format!("sem{seed}.csv");
    write_csv(dir, &file, &rows);
    let mut session = Session::new(dir);
    let declare: String = (0..NODES).map(|i| format!("    v{i}: real\n")).collect();
    last_json(&mut session, &format!("table t from \"{file}\":\n{declare}{}", sem.graph_text()));
    last_json(&mut session, &format!("joint j = g using t\nfit j with laplace seed {seed}"));
    run(&mut session, &format!("intervene j: set v{x} 1 vs 0, watch v{y} seed {seed}"))
}

#[test]
fn formula_route_covers_the_path_traced_effect_and_refusals_name_a_hedge() {
    let wanted = 30;
    let dir = std::env::temp_dir().join(format!("wp-intervene-formula-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let (mut covered, mut cases, mut refused) = (0, 0, 0);
    let mut missed = Vec::new();
    'seeds: for seed in 1..2000u64 {
        let sem = Sem::random(&mut Stream::new(seed));
        for (x, y) in [(1, 4), (0, 4), (1, 3), (2, 4), (0, 3), (0, 2)] {
            let truth = sem.total_effect(x, y);
            if truth == 0.0 || !hidden_touches_the_path(&sem, x, y) {
                continue;
            }
            let out = intervene_case(&dir, seed, x, y);
            if let Some(error) = out.error {
                let message = error.describe();
                // Every shape the complete algorithm returns is evaluated
                // (on real columns by the chain of normal regressions).
                assert!(!message.contains("cannot be evaluated"), "seed {seed} v{x} -> v{y}: {message}");
                assert!(message.contains("not identifiable") && message.contains("a hedge"), "seed {seed} v{x} -> v{y}: {message}");
                // The hidden causes named join the hedge: each has a child in it.
                let named: Vec<usize> = (0..sem.hidden.len()).filter(|k| message.contains(&format!(" u{k}"))).collect();
                assert!(!named.is_empty(), "{message}");
                for k in named {
                    let children = sem.hidden[k].map(|(c, _)| format!("v{c}"));
                    assert!(children.iter().all(|c| message.contains(c.as_str())), "{message}");
                }
                refused += 1;
                continue;
            }
            let json = out.displays.iter().rev().find_map(|d| d.json.clone()).unwrap();
            if json["route"] != "identifying formula" {
                continue;
            }
            let w = &json["watched"][0];
            let (lo, hi) = (w["lower"].as_f64().unwrap(), w["upper"].as_f64().unwrap());
            cases += 1;
            if lo <= truth && truth <= hi {
                covered += 1;
            } else {
                missed.push(format!("seed {seed} v{x} -> v{y}: truth {truth:.3}, interval [{lo:.3}, {hi:.3}]; {}", json["formulas"][0]["formula"]));
            }
            if cases == wanted {
                break 'seeds;
            }
            break;
        }
    }
    std::fs::remove_dir_all(&dir).ok();
    eprintln!("{covered} of {cases} intervals covered; {refused} refused with a hedge\n{}", missed.join("\n"));
    assert_eq!(cases, wanted, "the scan found {cases} formula cases");
    assert!(refused >= 1, "the scan met no effect a hedge makes unidentifiable");
    // A calibrated 90% interval covers in Binomial(30, 0.9) models: 23 or
    // more with probability above 0.98 (statrs).
    let at_least_23 = 1.0 - Binomial::new(0.9, wanted as u64).unwrap().cdf(22);
    assert!(at_least_23 > 0.98, "{at_least_23}");
    assert!(covered >= 23, "{covered} of {wanted} intervals covered the truth; missed:\n{}", missed.join("\n"));
}
