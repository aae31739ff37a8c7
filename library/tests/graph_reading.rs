//! Reading graphs: cell body lines, DOT text, and the errors a scientist sees.
//!
//! Structural expectations follow the definitions of a directed graph's
//! parents, children, ancestors and topological order (Pearl 2009, §1.2.1,
//! recalled). Error texts are pinned as snapshots so a change of wording is a
//! reviewed diff.

use expect_test::expect;
use waypath::graph::{from_dot, Graph, GraphBuilder, GraphError};

fn graph(name: &str, lines: &[&str]) -> Result<Graph, GraphError> {
    let mut b = GraphBuilder::new(name);
    for line in lines {
        b.add_line(line)?;
    }
    b.finish()
}

fn line_error(line: &str) -> String {
    let mut b = GraphBuilder::new("orchard");
    b.add_line("rootstock -> girth").unwrap();
    b.add_line(line).unwrap_err().to_string()
}

#[test]
fn chains_fans_and_bare_names_make_the_declared_edges() {
    let g = graph("stream", &["canopy -> shade -> temperature", "canopy -> litter, shade", "litter, temperature -> invertebrates", "gauge"]).unwrap();
    let mut edges = g.edges();
    edges.sort();
    // Each `->` joins every node of the left group to every node of the right group.
    assert_eq!(
        edges,
        vec![
            ("canopy", "litter"),
            ("canopy", "shade"),
            ("litter", "invertebrates"),
            ("shade", "temperature"),
            ("temperature", "invertebrates"),
        ]
    );
    assert_eq!(g.nodes().len(), 6);
    assert!(g.parents("gauge").unwrap().is_empty() && g.children("gauge").unwrap().is_empty());
}

#[test]
fn hidden_marks_only_the_first_group() {
    let g = graph("orchard", &["hidden soil -> girth, yield", "girth -> yield"]).unwrap();
    assert!(g.is_hidden("soil").unwrap());
    assert!(!g.is_hidden("girth").unwrap());
    assert!(!g.is_hidden("yield").unwrap());
    // A later plain mention does not un-hide a node.
    let g = graph("orchard", &["hidden soil", "soil -> girth"]).unwrap();
    assert!(g.is_hidden("soil").unwrap());
}

#[test]
fn topological_order_puts_parents_first_and_keeps_declaration_order_for_ties() {
    let g = graph("clinic", &["dose -> recovery", "age -> dose", "age -> recovery", "site"]).unwrap();
    // Kahn's algorithm: a node is listed only after all of its parents.
    assert_eq!(g.topological_order(), ["age", "dose", "recovery", "site"]);
    assert_eq!(g.ancestors("recovery").unwrap(), ["age", "dose"]);
    assert_eq!(g.descendants("age").unwrap(), ["dose", "recovery"]);
    assert_eq!(g.parents("recovery").unwrap(), ["age", "dose"]);
    assert_eq!(g.children("age").unwrap(), ["dose", "recovery"]);
}

#[test]
fn a_cycle_is_refused_and_printed() {
    let err = graph("orchard", &["rootstock -> girth -> yield", "yield -> girth"]).unwrap_err();
    expect![[r#"graph orchard has a cycle girth -> yield -> girth; a causal graph must be acyclic, so remove or reverse one of these edges"#]]
        .assert_eq(&err.to_string());
    let err = graph("loop", &["a -> a"]).unwrap_err();
    assert!(matches!(err, GraphError::Cycle { ref cycle, .. } if cycle == &["a", "a"]));
}

#[test]
fn line_errors_name_the_line_and_the_fix() {
    expect![[r#"graph orchard, line 2 `girth <- soil`: write every edge left to right with `->` (for example `b -> a` instead of `a <- b`)"#]]
        .assert_eq(&line_error("girth <- soil"));
    expect![[r#"graph orchard, line 2 `girth -> -> yield`: a node name is missing after a `->`"#]].assert_eq(&line_error("girth -> -> yield"));
    expect![[r#"graph orchard, line 2 `-> yield`: a node name is missing before the first `->`"#]].assert_eq(&line_error("-> yield"));
    expect![[r#"graph orchard, line 2 `girth -> yield,`: a node name is missing next to a comma"#]].assert_eq(&line_error("girth -> yield,"));
    expect![[r#"graph orchard, line 2 `hidden`: `hidden` needs the node it marks, as in `hidden soil -> girth`"#]].assert_eq(&line_error("hidden"));
    expect![[r#"graph orchard, line 2 `girth - yield`: `girth - yield` is not a node name; use letters, digits and `_`, starting with a letter, and join nodes with `->` or `,`"#]]
        .assert_eq(&line_error("girth - yield"));
}

#[test]
fn blank_lines_are_skipped_but_counted() {
    let mut b = GraphBuilder::new("orchard");
    b.add_line("   ").unwrap();
    let err = b.add_line("a ->").unwrap_err();
    assert!(matches!(err, GraphError::Line { line: 2, .. }));
}

#[test]
fn an_empty_graph_is_refused() {
    let err = GraphBuilder::new("orchard").finish().unwrap_err();
    expect![[r#"graph orchard has no nodes; add a line such as `a -> b` or a single node name"#]].assert_eq(&err.to_string());
}

#[test]
fn unknown_node_names_suggest_near_matches() {
    let g = graph("orchard", &["rootstock -> girth -> yield", "rootstock -> yield"]).unwrap();
    // Levenshtein distance: "yeild" is two edits from "yield".
    expect![[r#"graph orchard has no node `yeild`; did you mean `yield`?"#]].assert_eq(&g.total_effect("yeild", "girth").unwrap_err().to_string());
    expect![[r#"graph orchard has no node `Girth`; did you mean `girth`?"#]].assert_eq(&g.parents("Girth").unwrap_err().to_string());
    expect![[r#"graph orchard has no node `rainfall`; check the spelling against the graph's node list"#]]
        .assert_eq(&g.children("rainfall").unwrap_err().to_string());
}

#[test]
fn dot_digraph_with_quotes_chains_groups_and_comments() {
    let text = r#"
        // orchard survey, drawn elsewhere
        strict digraph "orchard survey" {
            graph [rankdir=LR];
            node [shape=box]
            # a comment line in the C preprocessor style
            "soil moisture" [hidden=true, label="soil"];
            rootstock -> girth -> yield [color=grey];
            /* two edges
               at once */
            "soil moisture" -> {girth yield}
            rootstock:e -> yield
            subgraph cluster_a { pruning; pruning -> girth }
        }
    "#;
    let g = from_dot("orchard", text).unwrap();
    let mut edges = g.edges();
    edges.sort();
    assert_eq!(
        edges,
        vec![
            ("girth", "yield"),
            ("pruning", "girth"),
            ("rootstock", "girth"),
            ("rootstock", "yield"),
            ("soil moisture", "girth"),
            ("soil moisture", "yield"),
        ]
    );
    assert!(g.is_hidden("soil moisture").unwrap());
    assert!(!g.is_hidden("rootstock").unwrap());
}

#[test]
fn dot_errors_name_the_line() {
    let undirected = from_dot("stream", "graph {\n a -- b\n}").unwrap_err();
    expect![[r#"graph stream, DOT line 1: this is an undirected `graph`; a causal graph needs `digraph` with `->` edges"#]]
        .assert_eq(&undirected.to_string());
    let unclosed = from_dot("stream", "digraph {\n a -> b\n c -> \n").unwrap_err();
    expect![[r#"graph stream, DOT line 3: expected a node name or value here"#]].assert_eq(&unclosed.to_string());
    let cycle = from_dot("stream", "digraph { a -> b -> c -> a }").unwrap_err();
    assert!(matches!(cycle, GraphError::Cycle { ref cycle, .. } if cycle == &["a", "b", "c", "a"]));
}
