//! Questions asked of small named graphs, with expectations derived by hand
//! from the textbook rules named beside each check:
//!
//! * d-separation: Pearl 2009, *Causality*, Definition 1.2.3 (recalled) —
//!   a path is blocked by a conditioned non-collider, or by a collider with
//!   neither itself nor a descendant conditioned on.
//! * total effect: the backdoor criterion, Pearl 2009, Definition 3.3.1 (recalled).
//! * direct effect: the single-door criterion, Pearl 2009, Theorem 5.3.1 (recalled).

use expect_test::expect;
use waypath::graph::{Graph, GraphBuilder};

fn graph(name: &str, lines: &[&str]) -> Graph {
    let mut b = GraphBuilder::new(name);
    for line in lines {
        b.add_line(line).expect("test graph line is valid");
    }
    b.finish().expect("test graph is acyclic")
}

/// The design document's orchard: soil is unmeasured and affects girth and yield.
fn orchard() -> Graph {
    graph("orchard", &["rootstock -> girth -> yield", "rootstock -> yield", "hidden soil -> girth, yield"])
}

/// The same orchard with soil left out.
fn orchard_without_soil() -> Graph {
    graph("orchard", &["rootstock -> girth -> yield", "rootstock -> yield"])
}

const NOTHING: [&str; 0] = [];

#[test]
fn orchard_total_effect_needs_no_adjustment() {
    // Backdoor criterion: rootstock has no parents, so no path enters it and
    // the empty set qualifies; being minimal, it is the only minimal set.
    let answer = orchard().total_effect("rootstock", "yield").unwrap();
    assert!(answer.identifiable);
    assert_eq!(answer.adjustment_sets, vec![Vec::<String>::new()]);
}

#[test]
fn orchard_direct_effect_is_not_identifiable_with_soil_hidden() {
    // Single-door: without the edge rootstock -> yield, the path
    // rootstock -> girth -> yield needs girth, but girth is then a
    // conditioned collider on rootstock -> girth <- soil -> yield, and soil is
    // hidden, so no observed set blocks both.
    let answer = orchard().direct_effect("rootstock", "yield").unwrap();
    assert!(!answer.identifiable);
    assert!(answer.adjustment_sets.is_empty());
    expect![[r#"No set of observed nodes blocks every path from rootstock to yield other than the edge rootstock -> yield: even given girth, the path rootstock -> girth <- soil -> yield stays open because conditioning opens the collider girth and it runs through the hidden node soil."#]]
        .assert_eq(&answer.reason);
}

#[test]
fn orchard_without_soil_direct_effect_holds_girth() {
    // Single-door: girth blocks rootstock -> girth -> yield and opens nothing.
    let answer = orchard_without_soil().direct_effect("rootstock", "yield").unwrap();
    assert!(answer.identifiable);
    assert_eq!(answer.adjustment_sets, vec![vec!["girth".to_owned()]]);
}

#[test]
fn orchard_paths_given_girth_explain_themselves() {
    // Definition 1.2.3: girth blocks the chain, opens the collider path.
    let paths = orchard().paths("rootstock", "yield", &["girth"]).unwrap();
    let text: Vec<String> = paths.iter().map(|p| p.render()).collect();
    expect![[r#"
        rootstock -> yield: open
        rootstock -> girth -> yield: blocked by conditioned non-collider girth
        rootstock -> girth <- soil -> yield: open; collider girth opened by conditioning on it"#]]
    .assert_eq(&text.join("\n"));
    assert!(paths.iter().all(|p| !p.is_backdoor));
}

#[test]
fn unconditioned_collider_blocks_and_its_descendant_opens() {
    // Collider: nitrogen -> vigour <- water, with vigour -> fruit_set.
    let g = graph("orchard", &["nitrogen -> vigour", "water -> vigour -> fruit_set"]);
    let closed = g.paths("nitrogen", "water", &NOTHING).unwrap();
    assert_eq!(closed.len(), 1);
    assert!(!closed[0].open);
    assert_eq!(closed[0].blocked_by, ["unconditioned collider vigour (no conditioned descendant)"]);
    // Conditioning on a descendant of the collider opens the path.
    let opened = g.paths("nitrogen", "water", &["fruit_set"]).unwrap();
    assert!(opened[0].open);
    assert_eq!(opened[0].opened_by, ["collider vigour opened by conditioning on its descendant fruit_set"]);
    assert!(g.d_separated(&["nitrogen"], &["water"], &NOTHING).unwrap());
    assert!(!g.d_separated(&["nitrogen"], &["water"], &["fruit_set"]).unwrap());
}

#[test]
fn d_separation_on_a_season_graph() {
    // Structure of Pearl's sprinkler example (Pearl 2009, Fig. 1.2, recalled),
    // renamed: month -> irrigation, month -> rainfall, both -> moisture -> mildew.
    let g = graph("vineyard", &["month -> irrigation, rainfall", "irrigation, rainfall -> moisture -> mildew"]);
    // The fork at month is closed by conditioning on it; moisture is an unconditioned collider.
    assert!(g.d_separated(&["irrigation"], &["rainfall"], &["month"]).unwrap());
    // Conditioning on mildew, a descendant of the collider moisture, opens irrigation -> moisture <- rainfall.
    assert!(!g.d_separated(&["irrigation"], &["rainfall"], &["month", "mildew"]).unwrap());
    // month and mildew: every path passes moisture or the pair irrigation/rainfall as non-colliders.
    assert!(g.d_separated(&["month"], &["mildew"], &["moisture"]).unwrap());
    assert!(!g.d_separated(&["month"], &["mildew"], &["irrigation"]).unwrap());
    // Sets: {month} is separated from {mildew} only when both irrigation and rainfall are held.
    assert!(g.d_separated(&["month"], &["mildew"], &["irrigation", "rainfall"]).unwrap());
    let overlap = g.d_separated(&["month"], &["mildew"], &["month"]).unwrap_err();
    expect![[r#"graph vineyard: node `month` is both in the first set and conditioned on; name it in one place only"#]].assert_eq(&overlap.to_string());
}

#[test]
fn confounder_is_the_adjustment_set() {
    // Backdoor: clinic_size -> referral and clinic_size -> recovery open the
    // path referral <- clinic_size -> recovery; {clinic_size} blocks it.
    let g = graph("clinics", &["clinic_size -> referral -> recovery", "clinic_size -> recovery"]);
    let answer = g.total_effect("referral", "recovery").unwrap();
    assert!(answer.identifiable);
    assert_eq!(answer.adjustment_sets, vec![vec!["clinic_size".to_owned()]]);
}

#[test]
fn two_minimal_sets_on_one_backdoor_chain() {
    // Backdoor path exposure <- a <- b -> outcome: either a or b blocks it,
    // so {a} and {b} are both minimal; {a, b} is not.
    let g = graph("stream", &["b -> a -> shading -> trout", "b -> trout"]);
    let answer = g.total_effect("shading", "trout").unwrap();
    assert_eq!(answer.adjustment_sets, vec![vec!["b".to_owned()], vec!["a".to_owned()]]);
}

#[test]
fn m_shaped_pretreatment_collider_is_left_alone() {
    // Backdoor: the only backdoor path shading <- a -> m <- c -> trout is
    // blocked at the collider m, so {} is minimal; {m} alone would open it.
    let g = graph("stream", &["a -> shading -> trout", "a -> m", "c -> m", "c -> trout"]);
    let answer = g.total_effect("shading", "trout").unwrap();
    assert_eq!(answer.adjustment_sets, vec![Vec::<String>::new()]);
    assert!(!g.d_separated(&["a"], &["c"], &["m"]).unwrap());
}

#[test]
fn hidden_confounder_without_proxy_is_not_identifiable() {
    // Backdoor: shading <- u -> trout cannot be blocked when u is hidden
    // (the front-door shape of Pearl 2009 §3.3.2; adjustment alone fails).
    let g = graph("stream", &["hidden u -> shading, trout", "shading -> algae -> trout"]);
    let answer = g.total_effect("shading", "trout").unwrap();
    assert!(!answer.identifiable);
    expect![[r#"No set of observed nodes blocks every backdoor path from shading to trout: the path shading <- u -> trout stays open and it runs through the hidden node u."#]]
        .assert_eq(&answer.reason);
}

#[test]
fn descendants_of_the_exposure_never_enter_a_backdoor_set() {
    // Backdoor condition (i): algae is a descendant of shading, so even though
    // conditioning on it would not open anything here, it must not be used.
    let g = graph("stream", &["hidden u -> shading, trout", "shading -> algae -> trout", "u -> algae"]);
    let answer = g.total_effect("shading", "trout").unwrap();
    assert!(!answer.identifiable);
    assert!(answer.adjustment_sets.is_empty());
}

#[test]
fn no_directed_path_means_zero_total_effect() {
    // No directed path from trout to shading: by the graph the total effect is zero.
    let g = graph("stream", &["shading -> trout"]);
    let answer = g.total_effect("trout", "shading").unwrap();
    assert!(answer.identifiable && answer.zero_by_graph);
    // The only path, trout <- shading, is a backdoor path into trout with
    // nothing observed on it to block it, so the zero cannot be checked.
    assert!(answer.adjustment_sets.is_empty());
    assert!(answer.reason.contains("total effect on shading is zero"));
}

#[test]
fn zero_total_effect_lists_the_backdoor_sets_that_check_it() {
    // Pearl 2009 Def. 3.3.1: with flow -> shading and flow -> trout, the path
    // shading <- flow -> trout is a backdoor path, so the zero can only be
    // checked given flow; conditioning on nothing leaves it confounded.
    let g = graph("stream", &["flow -> shading", "flow -> trout"]);
    let answer = g.total_effect("shading", "trout").unwrap();
    assert!(answer.zero_by_graph);
    assert_eq!(answer.adjustment_sets, vec![vec!["flow".to_owned()]]);
    assert!(answer.render().contains("zero by the graph"), "{}", answer.render());
}

#[test]
fn no_direct_edge_means_zero_direct_effect_and_sets_to_check_it() {
    // Single-door on the graph as it is (no edge to remove): {girth} separates rootstock and yield.
    let g = graph("orchard", &["rootstock -> girth -> yield"]);
    let answer = g.direct_effect("rootstock", "yield").unwrap();
    assert!(answer.identifiable);
    assert_eq!(answer.adjustment_sets, vec![vec!["girth".to_owned()]]);
    assert!(answer.reason.starts_with("The graph has no edge rootstock -> yield"));
}

#[test]
fn mediator_outcome_confounder_joins_the_direct_effect_set() {
    // Single-door: holding the mediator girth opens rootstock -> girth <- soil -> yield;
    // with soil observed it can be blocked, so the set is {soil, girth}.
    let g = graph("orchard", &["rootstock -> girth -> yield", "rootstock -> yield", "soil -> girth, yield"]);
    let answer = g.direct_effect("rootstock", "yield").unwrap();
    assert_eq!(answer.adjustment_sets, vec![vec!["soil".to_owned(), "girth".to_owned()]]);
}

#[test]
fn identification_serialises_with_names() {
    let json = serde_json::to_value(orchard_without_soil().direct_effect("rootstock", "yield").unwrap()).unwrap();
    assert_eq!(json["query"], "direct effect");
    assert_eq!(json["exposure"], "rootstock");
    assert_eq!(json["adjustment_sets"], serde_json::json!([["girth"]]));
    let path = serde_json::to_value(&orchard().paths("rootstock", "yield", &NOTHING).unwrap()[2]).unwrap();
    assert_eq!(path["nodes"], serde_json::json!(["rootstock", "girth", "soil", "yield"]));
    assert_eq!(path["arrows"], serde_json::json!(["->", "<-", "->"]));
    assert_eq!(path["open"], false);
}

#[test]
fn implications_of_a_fully_observed_graph_use_parents_of_the_later_node() {
    // Local Markov property (Pearl 2009 §1.2.2, recalled): a node is independent of
    // its non-descendants given its parents; here the minimal sets are exactly those parents.
    let g = graph("vineyard", &["month -> irrigation, rainfall", "irrigation, rainfall -> moisture -> mildew"]);
    expect![[r#"
        month is independent of moisture given irrigation, rainfall
        month is independent of mildew given moisture
        irrigation is independent of rainfall given month
        irrigation is independent of mildew given moisture
        rainfall is independent of mildew given moisture"#]]
    .assert_eq(&g.implications().render());
}

#[test]
fn implications_through_hidden_nodes_are_untestable() {
    // girth and yield_b share the hidden parent soil and nothing observed lies between them.
    let g = graph("orchard", &["hidden soil -> girth, yield_b", "rootstock -> girth"]);
    let imp = g.implications();
    assert_eq!(imp.untestable.len(), 1);
    let mut pair = [imp.untestable[0].a.as_str(), imp.untestable[0].b.as_str()];
    pair.sort_unstable();
    assert_eq!(pair, ["girth", "yield_b"]);
    // rootstock and yield_b: the only path rootstock -> girth <- soil -> yield_b is blocked at the collider.
    assert_eq!(imp.testable.len(), 1);
    assert!(imp.testable[0].given.is_empty());
}

#[test]
fn identification_renders_verdict_sets_and_reason() {
    // Backdoor: the confounder clinic_size is the one minimal set (as in confounder_is_the_adjustment_set).
    let g = graph("clinics", &["clinic_size -> referral -> recovery", "clinic_size -> recovery"]);
    expect![[r#"
        total effect of referral on recovery: identifiable
          condition on: clinic_size
        Each set blocks every backdoor path from referral to recovery and holds no descendant of referral (backdoor criterion)."#]]
    .assert_eq(&g.total_effect("referral", "recovery").unwrap().render());
    expect![[r#"
        total effect of rootstock on yield: identifiable
          condition on: nothing
        No backdoor path from rootstock to yield is open, so no adjustment is needed."#]]
    .assert_eq(&orchard().total_effect("rootstock", "yield").unwrap().render());
}
