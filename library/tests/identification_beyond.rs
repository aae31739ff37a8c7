//! Identification when no adjustment set exists: the front door, the
//! complete algorithm with its hedge, and instruments, on the published
//! worked examples named beside each check (structures recalled from the
//! texts; the formulas' numbers are checked against simulated structural
//! models in `tests/python/test_identification_reference.py`).

use waypath::graph::{Complete, Graph, GraphBuilder};

fn graph(name: &str, lines: &[&str]) -> Graph {
    let mut b = GraphBuilder::new(name);
    for line in lines {
        b.add_line(line).expect("test graph line is valid");
    }
    b.finish().expect("test graph is acyclic")
}

fn names(v: &[&str]) -> Vec<String> {
    v.iter().map(|s| s.to_string()).collect()
}

#[test]
fn front_door_graph_is_identified_through_the_mediator() {
    // Pearl 2009, Causality, §3.3.2, Figure 3.5 (recalled): X -> Z -> Y with a
    // hidden common cause of X and Y; eq. (3.42): sum_z P(z|x) sum_x' P(y|x',z) P(x').
    let g = graph("stream", &["hidden u -> shading, trout", "shading -> algae -> trout"]);
    let id = g.total_effect("shading", "trout").unwrap();
    assert!(!id.identifiable, "no adjustment set exists");
    let beyond = id.beyond.expect("a total effect without adjustment set looks further");
    assert!(beyond.identified);
    assert_eq!(beyond.route, "front door");
    assert_eq!(beyond.front_door_set, names(&["algae"]));
    assert_eq!(
        beyond.formula_text.as_deref(),
        Some("Pr[trout | do(shading)] = sum over algae of ( Pr[algae | shading] · sum over shading′ of ( Pr[trout | shading′, algae] · Pr[shading′] ) )")
    );
    assert_eq!(beyond.formula_nodes, names(&["shading", "algae", "trout"]));
    assert!(beyond.instruments.is_empty(), "nothing moves shading apart from u");
}

#[test]
fn front_door_fails_when_the_mediator_is_confounded_with_the_exposure() {
    // Pearl 2009, Figure 3.9 (b) shape (recalled): a hidden cause of X and the
    // mediator Z breaks condition 2 of the front door; P(z | do(x)) is then a
    // bow, so the effect is not identifiable and the hedge is {X, Z} ⊃ {Z}.
    let g = graph("fd_broken", &["x -> z -> y", "hidden u -> x, z"]);
    assert_eq!(g.front_door("x", "y").unwrap(), None);
    match g.identify_intervention(&["x"], &["y"]).unwrap() {
        Complete::NotIdentified { hedge } => {
            assert_eq!(hedge.outer, names(&["x", "z"]));
            assert_eq!(hedge.inner, names(&["z"]));
        }
        other => panic!("expected a hedge, got {other:?}"),
    }
}

#[test]
fn bow_arc_is_not_identifiable_and_its_hedge_is_the_pair() {
    // The bow arc, Pearl 2009 §3.5 (recalled); Shpitser & Pearl 2006 use it as
    // the smallest hedge: F = {X, Y}, F' = {Y}.
    let g = graph("bow", &["x -> y", "hidden u -> x, y"]);
    let beyond = g.total_effect("x", "y").unwrap().beyond.unwrap();
    assert!(!beyond.identified);
    assert_eq!(beyond.route, "none");
    let hedge = beyond.hedge.unwrap();
    assert_eq!((hedge.outer, hedge.inner), (names(&["x", "y"]), names(&["y"])));
    assert!(beyond.reason.contains("{x, y} ⊃ {y}"), "{}", beyond.reason);
}

#[test]
fn napkin_graph_is_identified_by_the_complete_algorithm_only() {
    // The napkin graph (Pearl & Mackenzie 2018, The Book of Why, ch. 7;
    // Shpitser & Pearl 2006, recalled): w -> z -> x -> y, hidden causes of
    // {w, x} and {w, y}. No backdoor or front-door set; identified by
    // sum_w P(x, y | z, w) P(w) / sum_w P(x | z, w) P(w).
    let g = graph("napkin", &["w -> z -> x -> y", "hidden a -> w, x", "hidden b -> w, y"]);
    let id = g.total_effect("x", "y").unwrap();
    assert!(!id.identifiable);
    let beyond = id.beyond.unwrap();
    assert!(beyond.identified, "{}", beyond.reason);
    assert_eq!(beyond.route, "complete algorithm");
    assert!(beyond.front_door_set.is_empty());
    // The formula must use z (the napkin's instrument-like node) and w.
    assert_eq!(beyond.formula_nodes, names(&["w", "z", "x", "y"]));
    assert_eq!(beyond.also_set, names(&["z"]));
    // A sum over the outcome inside the formula writes it primed.
    let text = beyond.formula_text.unwrap();
    assert!(text.contains("sum over y′, w of") && text.contains("Pr[y′ | w, z, x]"), "{text}");
}

#[test]
fn a_confounded_intermediate_with_a_clean_route_is_identified() {
    // Tian & Pearl 2002 c-component factorisation (recalled): X -> Y, X -> M -> Y,
    // hidden cause of M and Y. X has no backdoor path, so adjustment by nothing
    // works; the complete algorithm must agree (identified, no hedge).
    let g = graph("mediated", &["x -> m -> y", "x -> y", "hidden u -> m, y"]);
    assert!(g.total_effect("x", "y").unwrap().identifiable);
    assert!(matches!(g.identify_intervention(&["x"], &["y"]).unwrap(), Complete::Identified { .. }));
}

#[test]
fn joint_intervention_with_two_bows_fails_on_the_confounded_one() {
    // Shpitser & Pearl 2006, Theorem 4 (recalled): P_x(y) is not identifiable
    // iff a hedge exists. Here x1 -> y1 is a bow, x2 -> y2 is clean.
    let g = graph("two", &["x1 -> y1", "x2 -> y2", "hidden u -> x1, y1"]);
    assert!(matches!(g.identify_intervention(&["x2"], &["y2"]).unwrap(), Complete::Identified { .. }));
    match g.identify_intervention(&["x1", "x2"], &["y1", "y2"]).unwrap() {
        Complete::NotIdentified { hedge } => assert_eq!((hedge.outer, hedge.inner), (names(&["x1", "y1"]), names(&["y1"]))),
        other => panic!("expected a hedge, got {other:?}"),
    }
}

#[test]
fn instrument_and_conditional_instrument_are_named() {
    // Pearl 2009 §7.4.5 (recalled): z -> x -> y with a hidden cause of x and y;
    // z is an instrument given nothing.
    let g = graph("iv", &["z -> x -> y", "hidden u -> x, y"]);
    let beyond = g.total_effect("x", "y").unwrap().beyond.unwrap();
    assert!(!beyond.identified);
    assert_eq!(beyond.instruments.len(), 1);
    assert_eq!(beyond.instruments[0].node, "z");
    assert!(beyond.instruments[0].given.is_empty());
    assert!(beyond.lines().iter().any(|l| l.contains("monotonicity")));
    // Brito & Pearl 2002 (recalled): with w -> z and w -> y, z is an instrument only given w.
    let g = graph("civ", &["w -> z -> x -> y", "w -> y", "hidden u -> x, y"]);
    let beyond = g.total_effect("x", "y").unwrap().beyond.unwrap();
    let z = beyond.instruments.iter().find(|i| i.node == "z").expect("z qualifies given w");
    assert_eq!(z.given, names(&["w"]));
    // w itself reaches y directly, so it is no instrument.
    assert!(beyond.instruments.iter().all(|i| i.node != "w"));
}

#[test]
fn hidden_exposure_is_refused_by_the_complete_algorithm() {
    let g = graph("bow", &["x -> y", "hidden u -> x, y"]);
    let e = g.identify_intervention(&["u"], &["y"]).unwrap_err().to_string();
    assert!(e.contains("`u` is hidden"), "{e}");
}

#[test]
fn a_hidden_cause_of_thousands_of_nodes_is_refused_before_it_is_projected() {
    // Bad input: one hidden node with 2,100 observed children would join
    // about 2.2 million pairs; the answer says the question is too large
    // instead of building them.
    let mut b = GraphBuilder::new("wide");
    b.add_node("h", true);
    for line in ["x -> y", "h -> x", "h -> y"] {
        b.add_line(line).unwrap();
    }
    for i in 0..2100 {
        b.add_edge("h", &format!("c{i}"));
    }
    let g = b.finish().unwrap();
    let beyond = g.total_effect("x", "y").unwrap().beyond.unwrap();
    assert_eq!(beyond.route, "undetermined");
    assert!(beyond.reason.contains("more than 2000000 pairs"), "{}", beyond.reason);
}

#[test]
fn instrument_search_says_when_it_stops_at_its_limit() {
    // z ← c → y with x → y confounded by u: z is no instrument (its one
    // path to x runs through the collider y), so every conditioning set is
    // tried; with 20 more unconnected nodes there are 2^22 sets, beyond the
    // limit, and the answer must say the list may be short.
    let mut lines = vec!["c -> z".to_string(), "c -> y".to_string(), "x -> y".to_string(), "hidden u -> x, y".to_string()];
    lines.extend((0..20).map(|i| format!("n{i}")));
    let refs: Vec<&str> = lines.iter().map(String::as_str).collect();
    let beyond = graph("wide", &refs).total_effect("x", "y").unwrap().beyond.expect("no adjustment set");
    assert!(!beyond.instruments_complete);
    assert!(beyond.lines().iter().any(|l| l.contains("stopped at its limit")), "{:?}", beyond.lines());
    // Without the extra nodes the search settles every candidate.
    let small = graph("narrow", &["c -> z", "c -> y", "x -> y", "hidden u -> x, y"]).total_effect("x", "y").unwrap().beyond.unwrap();
    assert!(small.instruments_complete && small.instruments.is_empty(), "{small:?}");
}
