//! `compare routes` with more than two routes: where the graph holds both
//! an adjustment set and a front-door set, the front door is estimated
//! beside the adjustment and joint-model routes. The truth of the
//! simulated linear model is path-traced (Wright 1934): the one directed
//! path x → m → y, 0.8 × 0.5.

mod common;

use common::cells::last_json;

use waypath::cells::Session;

const TRUTH: f64 = 0.4;

#[test]
fn front_door_route_stands_beside_adjustment_and_both_cover_the_truth() {
    let mut session = Session::new(".");
    let cells = "graph mill:
    flow -> wear -> grit -> yield
    flow -> yield
simulate runs from mill rows 1500 seed 9:
    flow = normal(0, 1)
    wear = normal(0.7 * flow, 1)
    grit = normal(0.8 * wear, 1)
    yield = normal(0.5 * grit + 0.9 * flow, 1)
";
    last_json(&mut session, cells);
    let json = last_json(&mut session, "compare routes for total effect of wear on yield in mill using runs with laplace seed 5");
    assert_eq!(json["adjustment"]["adjustment_set"], serde_json::json!(["flow"]));
    let front = &json["front_door"];
    assert_eq!(front["mediators"], serde_json::json!(["grit"]), "{json}");
    assert!(front["formula"].as_str().unwrap().starts_with("Pr[yield | do(wear)] = sum over grit of"), "{front}");
    for route in [&json["adjustment"], &json["joint"], front] {
        let (lo, hi) = (route["lower"].as_f64().unwrap(), route["upper"].as_f64().unwrap());
        assert!(lo <= TRUTH && TRUTH <= hi, "truth {TRUTH} outside [{lo}, {hi}]: {route}");
    }
    let d = &json["difference_front_door"];
    assert!(d["lower"].as_f64().unwrap() <= 0.0 && 0.0 <= d["upper"].as_f64().unwrap(), "{d}");
    // Without a front-door set (flow also drives grit), no such route.
    let cells = "graph mill2:
    flow -> wear -> grit -> yield
    flow -> yield
    flow -> grit
    ";
    last_json(&mut session, cells);
    let json = last_json(&mut session, "compare routes for total effect of wear on yield in mill2 using runs with laplace seed 5");
    assert!(json["front_door"].is_null(), "{json}");
}
