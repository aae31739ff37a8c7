//! Statements about the causal graph alone: `graph`, `ask`, `paths`,
//! `implications`. None of them touches data.

use serde_json::json;

use super::data::is_name;
use super::grammar::{ASK, GRAPH, GRAPH_FILE, IMPLICATIONS, PATHS};
use super::{form_error, header, option_text, unquote};
use crate::cells::figures::{self, GraphMarks};
use crate::cells::output::{html_block, html_list, CellError, Display, Grid};
use crate::cells::parse::{split_commas, Statement};
use crate::cells::session::{RunControl, Session};
use crate::graph::{from_dot, Graph, GraphBuilder, GraphError, Identification, PathListing};

/// The most edges a graph's description lists one by one.
const LISTED_EDGES: usize = figures::FIGURE_EDGES;

/// The largest DOT file read (a causal graph file is a few kilobytes; a
/// bigger one is most likely the wrong file).
const MAX_DOT_BYTES: u64 = 64 << 20;

/// The most unreadable body lines one error lists by name.
const BAD_LINES_LISTED: usize = 10;

/// What is wrong with one body line, without the builder's own line count
/// (the cell line is the one number the scientist sees).
fn body_line_problem(error: GraphError) -> String {
    match error {
        GraphError::Line { text, problem, .. } => format!("`{text}`: {problem}"),
        other => other.to_string(),
    }
}

/// One error for every unreadable body line, placed at the first of them.
fn bad_lines_error(graph: &str, bad: &[(usize, String)]) -> Option<CellError> {
    let (first_line, first_problem) = bad.first()?;
    if bad.len() == 1 {
        return Some(CellError::at(*first_line, format!("graph {graph}: {first_problem}")));
    }
    let mut listed: Vec<String> = bad.iter().take(BAD_LINES_LISTED).map(|(n, p)| format!("line {n} {p}")).collect();
    if bad.len() > BAD_LINES_LISTED {
        listed.push(format!("and {} more", bad.len() - BAD_LINES_LISTED));
    }
    Some(CellError::at(
        *first_line,
        format!("graph {graph} has {} body lines it cannot read: {}", bad.len(), listed.join("; ")),
    ))
}

/// `graph NAME:` with a body of edges, or `graph NAME from "FILE.dot"`.
pub(crate) fn graph(session: &mut Session, st: &Statement) -> Result<Vec<Display>, CellError> {
    let graph = if let Some(([name], _)) = GRAPH.read_n(st.head()).ok().filter(|([name], _)| is_name(name) && st.expects_body()) {
        if st.body.is_empty() {
            return Err(CellError::at(st.header.number, format!("graph {name} has no edges; list them indented below the header")));
        }
        let mut builder = GraphBuilder::new(name);
        let mut bad_lines = Vec::new();
        for line in &st.body {
            if let Err(e) = builder.add_line(&line.text) {
                bad_lines.push((line.number, body_line_problem(e)));
            }
        }
        if let Some(error) = bad_lines_error(name, &bad_lines) {
            return Err(error);
        }
        builder.finish().map_err(|e| CellError::at(st.header.number, e.to_string()))?
    } else if let Some(([name, raw], _)) = GRAPH_FILE.read_n(st.head()).ok().filter(|([name, _], _)| is_name(name) && !st.expects_body()) {
        let path = unquote(raw).ok_or_else(|| form_error(st, GRAPH_FILE.usage))?;
        let file = session.resolve(path);
        let size = std::fs::metadata(&file).map(|m| m.len()).unwrap_or(0);
        if size > MAX_DOT_BYTES {
            return Err(CellError::at(
                st.header.number,
                format!("the DOT file {path} holds {} bytes, more than the {MAX_DOT_BYTES} a graph file may have; check that it is the right file", size),
            ));
        }
        session.data_files.remember(&file);
        let text = std::fs::read_to_string(&file).map_err(|e| {
            CellError::at(st.header.number, format!("cannot read the DOT file {path} ({e})"))
        })?;
        from_dot(name, &text).map_err(|e| CellError::at(st.header.number, format!("{path}: {e}")))?
    } else {
        return Err(form_error(st, GRAPH.usage));
    };
    let display = describe_graph(&graph);
    session.graphs.insert(graph.name().to_string(), graph);
    Ok(vec![display])
}

pub(crate) fn describe_graph(graph: &Graph) -> Display {
    let hidden: Vec<&str> = graph.nodes().iter().filter(|n| n.hidden).map(|n| n.name.as_str()).collect();
    let edges = graph.edges();
    let heading = format!(
        "graph {}: {} nodes ({} hidden), {} edges",
        graph.name(),
        graph.nodes().len(),
        hidden.len(),
        edges.len()
    );
    let mut notes = Vec::new();
    if edges.len() > LISTED_EDGES || graph.nodes().len() > figures::FIGURE_NODES {
        notes.push(format!(
            "the graph is too large to list its causal order and edges or to draw here ({} nodes, {} edges); ask questions of parts of it",
            graph.nodes().len(),
            edges.len()
        ));
    } else {
        notes.push(format!("causal order: {}", graph.topological_order().join(", ")));
        if !hidden.is_empty() {
            notes.push(format!("hidden (unmeasured): {}", hidden.join(", ")));
        }
        let edge_list: Vec<String> = edges.iter().map(|(a, b)| format!("{a} -> {b}")).collect();
        notes.push(format!("edges: {}", edge_list.join("; ")));
    }
    let plain = format!("{heading}\n{}", notes.iter().map(|n| format!("• {n}")).collect::<Vec<_>>().join("\n"));
    let json = json!({
        "name": graph.name(),
        "nodes": graph.nodes().iter().map(|n| json!({"name": n.name, "hidden": n.hidden})).collect::<Vec<_>>(),
        "edges": edges.iter().map(|(a, b)| json!([a, b])).collect::<Vec<_>>(),
    });
    let svg = figures::graph(graph, graph.name(), &GraphMarks::default()).ok();
    Display { plain, html: Some(html_block(&heading, &[html_list(&notes)])), svg, json: Some(json) }
}

/// `ask total|direct effect of X on Y in G`.
pub(crate) fn ask(session: &mut Session, st: &Statement, control: &RunControl) -> Result<Vec<Display>, CellError> {
    let ([kind, x, y, g], _) = header(st, &ASK)?;
    let graph = session.require_graph(g, st.header.number)?;
    let answer = if kind == "total" {
        graph.total_effect_with_cancel(x, y, control.cancel)
    } else {
        graph.direct_effect_with_cancel(x, y, control.cancel)
    };
    let answer = answer.map_err(|e| CellError::at(st.header.number, e.to_string()))?;
    let mut display = describe_identification(&answer);
    let adjusted = answer.adjustment_sets.first().cloned().unwrap_or_default();
    let (formula, hedge) = beyond_marks(&answer);
    let marks = GraphMarks { exposure: Some(x), outcome: Some(y), adjusted: &adjusted, highlight: Vec::new(), formula: &formula, hedge: &hedge };
    display.svg = figures::graph(graph, &format!("{kind} effect of {x} on {y} in {g}"), &marks).ok();
    Ok(vec![display])
}

/// The nodes a figure marks as used by the identifying formula, and as
/// the hedge (with the hidden causes joining it).
pub(crate) fn beyond_marks(id: &Identification) -> (Vec<String>, Vec<String>) {
    let Some(beyond) = &id.beyond else {
        return (Vec::new(), Vec::new());
    };
    let hedge = beyond.hedge.iter().flat_map(|h| h.outer.iter().chain(&h.hidden_causes).cloned()).collect();
    (beyond.formula_nodes.clone(), hedge)
}

pub(crate) fn describe_identification(id: &Identification) -> Display {
    let query = serde_json::to_value(id.query).unwrap_or_default();
    let query = query.as_str().unwrap_or("effect").to_string();
    let verdict = match (id.zero_by_graph, id.identifiable, &id.beyond) {
        (true, _, _) => "zero by the graph",
        (false, true, _) => "identifiable",
        (false, false, Some(b)) if b.identified && b.route == "front door" => "identifiable through the front door (not by adjustment)",
        (false, false, Some(b)) if b.identified => "identifiable by the complete algorithm (not by adjustment)",
        (false, false, Some(_)) => "NOT identifiable",
        (false, false, None) => "NOT identifiable by adjustment",
    };
    let heading = format!("{query} of {} on {}: {verdict}", id.exposure, id.outcome);
    let set_column = if id.zero_by_graph { "to check the zero, stratify by" } else { "stratify by" };
    let mut grid = Grid::new(&["option", set_column]);
    for (i, set) in id.adjustment_sets.iter().enumerate() {
        let members = if set.is_empty() { "nothing (no adjustment needed)".to_string() } else { set.join(", ") };
        grid.push(vec![format!("{}", i + 1), members]);
    }
    let mut plain = heading.clone();
    let mut parts = Vec::new();
    if id.identifiable && !id.adjustment_sets.is_empty() {
        plain.push_str(&format!("\n{}", grid.to_text()));
        parts.push(grid.to_html());
    }
    let mut notes = vec![id.reason.clone()];
    if !id.search_complete {
        notes.push("the search stopped at its limit; further minimal sets may exist".to_string());
    }
    if let Some(beyond) = &id.beyond {
        notes.extend(beyond.lines());
    }
    notes.push("this answer rests on the graph as written: an arrow left out is a claim of no effect".to_string());
    for n in &notes {
        plain.push_str(&format!("\n• {n}"));
    }
    parts.push(html_list(&notes));
    let json = json!({
        "query": query,
        "exposure": id.exposure,
        "outcome": id.outcome,
        "identifiable": id.identifiable,
        "zero_by_graph": id.zero_by_graph,
        "adjustment_sets": id.adjustment_sets,
        "reason": id.reason,
        "beyond_adjustment": id.beyond,
    });
    Display { plain, html: Some(html_block(&heading, &parts)), svg: None, json: Some(json) }
}

/// `paths from X to Y in G [given A, B]`.
pub(crate) fn paths(session: &mut Session, st: &Statement, control: &RunControl) -> Result<Vec<Display>, CellError> {
    let ([x, y, g], rest) = header(st, &PATHS)?;
    let given = match option_text(rest, "given") {
        _ if rest.is_empty() => Vec::new(),
        Some(list) if !list.is_empty() => split_commas(list),
        _ => return Err(form_error(st, PATHS.usage)),
    };
    let graph = session.require_graph(g, st.header.number)?;
    let listing = graph.path_listing(x, y, &given, control.cancel).map_err(|e| CellError::at(st.header.number, e.to_string()))?;
    let reports = &listing.paths;
    let given_text = if given.is_empty() { "conditioning on nothing".to_string() } else { format!("given {}", given.join(", ")) };
    let open = reports.iter().filter(|p| p.open).count();
    let found = if listing.complete { format!("{} found", reports.len()) } else { format!("the first {} listed", reports.len()) };
    let heading = format!("paths from {x} to {y} in {g}, {given_text}: {found}, {open} open");
    let notes = if listing.complete { Vec::new() } else { cut_list_notes(x, y, &listing) };
    let mut grid = Grid::new(&["path", "kind", "status", "why"]);
    for p in reports {
        let why = if p.open { p.opened_by.join("; ") } else { p.blocked_by.join("; ") };
        grid.push(vec![
            p.drawing(),
            if p.is_backdoor { "backdoor" } else { "front" }.to_string(),
            if p.open { "open" } else { "blocked" }.to_string(),
            why,
        ]);
    }
    let mut json = json!({ "paths": reports.iter().map(|p| json!({
        "nodes": p.nodes, "arrows": p.arrows, "open": p.open, "blocked_by": p.blocked_by,
        "opened_by": p.opened_by, "backdoor": p.is_backdoor,
    })).collect::<Vec<_>>() });
    if !listing.complete {
        json["complete"] = json!(false);
        json["separated"] = json!(listing.separated);
        json["directed_paths"] = json!(listing.directed_paths);
    }
    let mut plain = if reports.is_empty() {
        format!("{heading}\n• no path joins {x} and {y}")
    } else {
        format!("{heading}\n{}", grid.to_text())
    };
    for n in &notes {
        plain.push_str(&format!("\n• {n}"));
    }
    let highlight = open_edges(reports);
    let marks = GraphMarks { exposure: Some(x), outcome: Some(y), adjusted: &given, highlight, ..Default::default() };
    let svg = figures::graph(graph, &format!("open paths from {x} to {y} in {g}"), &marks).ok();
    let mut parts = vec![grid.to_html()];
    if !notes.is_empty() {
        parts.push(html_list(&notes));
    }
    Ok(vec![Display { plain, html: Some(html_block(&heading, &parts)), svg, json: Some(json) }])
}

/// What a cut path list still says exactly: the d-separation verdict and
/// the number of directed paths.
fn cut_list_notes(x: &str, y: &str, listing: &PathListing) -> Vec<String> {
    let verdict = if listing.separated { "every path is blocked (they are d-separated)" } else { "at least one path is open (they are d-connected)" };
    vec![
        format!("the list stops at its limit: more paths join {x} and {y} than are shown, so ask about a closer pair or a smaller graph to see them all"),
        format!("whatever the list shows, {verdict}, found directly by the d-separation test"),
        format!("directed (causal) paths between {x} and {y}: {}, counted exactly over the causal order", count_words(listing.directed_paths)),
    ]
}

/// A path count in words: whole below 10^15, else in powers of ten.
fn count_words(count: f64) -> String {
    if count < 1e15 { format!("{count:.0}") } else { format!("about {count:.3e}") }
}

/// Edges (cause, effect) that lie on an open path.
fn open_edges(reports: &[crate::graph::PathReport]) -> Vec<(String, String)> {
    let mut edges = Vec::new();
    let mut seen = std::collections::HashSet::new();
    for p in reports.iter().filter(|p| p.open) {
        for (i, arrow) in p.arrows.iter().enumerate() {
            let (a, b) = (&p.nodes[i], &p.nodes[i + 1]);
            let edge = match arrow {
                crate::graph::Arrow::Forward => (a.clone(), b.clone()),
                crate::graph::Arrow::Backward => (b.clone(), a.clone()),
            };
            if seen.insert(edge.clone()) {
                edges.push(edge);
            }
        }
    }
    edges
}

/// `implications of G`: the independences the graph claims.
pub(crate) fn implications(session: &mut Session, st: &Statement, control: &RunControl) -> Result<Vec<Display>, CellError> {
    let ([g], _) = header(st, &IMPLICATIONS)?;
    let graph = session.require_graph(g, st.header.number)?;
    let imp = graph.implications_with_cancel(control.cancel).map_err(|e| CellError::at(st.header.number, e.to_string()))?;
    let heading = format!(
        "implications of {g}: {} testable independence(s), {} untestable pair(s)",
        imp.testable.len(),
        imp.untestable.len()
    );
    let mut grid = Grid::new(&["claim", "given"]);
    for i in &imp.testable {
        let given = if i.given.is_empty() { "nothing".to_string() } else { i.given.join(", ") };
        grid.push(vec![format!("{} ⫫ {}", i.a, i.b), given]);
    }
    let untestable: Vec<String> = imp
        .untestable
        .iter()
        .map(|p| format!("{} and {}: only hidden nodes separate them; the data cannot test this pair", p.a, p.b))
        .collect();
    let mut plain = heading.clone();
    let mut parts = Vec::new();
    if imp.testable.is_empty() {
        plain.push_str("\n• every pair of observed nodes is joined by an edge or only hidden nodes separate it, so there is nothing to test");
    } else {
        plain.push_str(&format!("\n{}", grid.to_text()));
        parts.push(grid.to_html());
    }
    for u in &untestable {
        plain.push_str(&format!("\n• {u}"));
    }
    parts.push(html_list(&untestable));
    let json = json!({
        "independencies": imp.testable.iter().map(|i| json!({"a": i.a, "b": i.b, "given": i.given})).collect::<Vec<_>>(),
        "untestable": imp.untestable.iter().map(|p| json!({"a": p.a, "b": p.b})).collect::<Vec<_>>(),
    });
    Ok(vec![Display { plain, html: Some(html_block(&heading, &parts)), svg: None, json: Some(json) }])
}
