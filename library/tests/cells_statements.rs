//! The cell language end to end: statements run against a session and give
//! the documented JSON structures (README, "Output structures"), errors name
//! the cell line, and nothing is dropped silently.

mod common;

use common::cells::run;

use std::io::Write;

use waypath::cells::Session;

fn orchard_csv(dir: &std::path::Path) {
    // Invented rows; one has a non-positive girth so `keep where` must drop it.
    let mut f = std::fs::File::create(dir.join("trees.csv")).unwrap();
    writeln!(f, "rootstock,girth,yield").unwrap();
    let rows = [
        ("dwarf", 20.5, 21.0), ("standard", 31.0, 40.2), ("dwarf", 22.1, 25.3), ("standard", 29.4, 37.9),
        ("dwarf", -1.0, 19.0), ("standard", 33.3, 44.0), ("dwarf", 24.0, 27.1), ("standard", 30.2, 39.5),
    ];
    for (r, g, y) in rows {
        writeln!(f, "{r},{g},{y}").unwrap();
    }
}

#[test]
fn table_statement_reports_rows_kept_and_dropped_by_filters() {
    let dir = std::env::temp_dir().join(format!("wp-cells-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    orchard_csv(&dir);
    let mut session = Session::new(&dir);
    let out = run(&mut session, "table trees from \"trees.csv\":\n    rootstock: category(dwarf, standard)\n    keep where girth > 0\n");
    assert!(out.error.is_none(), "{:?}", out.error);
    let json = out.displays[0].json.as_ref().unwrap();
    // 8 data rows written above, one with girth -1.0: 7 kept, 1 dropped.
    assert_eq!(json["rows"], 7);
    assert_eq!(json["dropped"], 1);
    assert_eq!(json["columns"][0]["levels"], serde_json::json!(["dwarf", "standard"]));
    assert!(out.displays[0].plain.contains("kept 7 of 8 rows, left out 1"));
}

#[test]
fn ask_gives_the_documented_structure_and_a_graph_figure() {
    let mut session = Session::new(".");
    let out = run(
        &mut session,
        "graph g:\n    z -> x -> y\n    z -> y\nask total effect of x on y in g\n",
    );
    assert!(out.error.is_none(), "{:?}", out.error);
    let ask = &out.displays[1];
    let json = ask.json.as_ref().unwrap();
    // Backdoor criterion (Pearl 2009, §3.3): z is a common cause, so {z} is the one minimal set.
    assert_eq!(json["adjustment_sets"], serde_json::json!([["z"]]));
    assert_eq!(json["identifiable"], true);
    for key in ["query", "exposure", "outcome", "reason"] {
        assert!(json.get(key).is_some(), "missing {key}");
    }
    let svg = ask.svg.as_ref().expect("ask draws the graph");
    assert!(svg.contains("<title>"));
}

#[test]
fn errors_name_the_cell_line_of_the_body() {
    let mut session = Session::new(".");
    let out = run(&mut session, "graph g:\n    a -> b\n    b -> -> c\n");
    let err = out.error.expect("a malformed edge line is an error");
    assert_eq!(err.line, Some(3));
    assert!(!err.message.contains("line"), "one line number, the cell's: {}", err.describe());
}

#[test]
fn every_bad_line_of_a_graph_body_is_reported_at_once() {
    let mut session = Session::new(".");
    let out = run(&mut session, "graph g:\n    a -> b\n    b -> -> c\n    c - d\n    x -> y\n    y <- z\n");
    let err = out.error.expect("malformed edge lines are an error");
    assert_eq!(err.line, Some(3), "placed at the first bad line");
    let text = err.describe();
    assert!(!text.contains('\n'), "one line: {text}");
    for (n, shown) in [(3, "`b -> -> c`"), (4, "`c - d`"), (6, "`y <- z`")] {
        assert!(text.contains(&format!("line {n} {shown}")), "line {n} missing from: {text}");
    }
    assert!(text.contains("3 body lines"), "{text}");
    assert!(!text.contains("line 5"), "a good line is not listed: {text}");
}

#[test]
fn unknown_statement_suggests_the_near_keyword() {
    let mut session = Session::new(".");
    let out = run(&mut session, "grpah g:\n    a -> b\n");
    let err = out.error.unwrap();
    assert!(err.message.contains("did you mean graph?"), "{}", err.message);
}

#[test]
fn fit_reports_labelled_parameters_in_the_documented_structure() {
    let dir = std::env::temp_dir().join(format!("wp-cells-fit-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    orchard_csv(&dir);
    let mut session = Session::new(&dir);
    let out = run(
        &mut session,
        "table trees from \"trees.csv\":\n    rootstock: category(dwarf, standard)\n    keep where girth > 0\n\
         model m:\n    yield from rootstock using trees\nfit m with laplace seed 5\n",
    );
    assert!(out.error.is_none(), "{:?}", out.error);
    let json = out.displays[2].json.as_ref().unwrap();
    let names: Vec<&str> = json["estimates"].as_array().unwrap().iter().map(|p| p["parameter"].as_str().unwrap()).collect();
    assert_eq!(names, ["rootstock[dwarf]", "rootstock[standard]", "spread"]);
    for key in ["model", "method", "seed", "settings", "interval_mass", "health", "warnings", "seconds"] {
        assert!(json.get(key).is_some(), "missing {key}");
    }
    assert_eq!(json["seed"], 5);
    // A Laplace fit has no sampler whose health could be judged.
    assert_eq!(json["health"], serde_json::Value::Null);
    // Category levels are shown by label, never by index code.
    assert!(!out.displays[2].plain.contains("rootstock[0]"));
    // The spread cannot be negative, so its share of draws above zero says
    // nothing and is left out; the intercepts keep theirs.
    let estimates = json["estimates"].as_array().unwrap();
    assert_eq!(estimates[2]["share_above_zero"], serde_json::Value::Null);
    assert!(estimates[0]["share_above_zero"].is_number());
    let spread_row = out.displays[2].plain.lines().find(|l| l.starts_with("spread")).expect("a spread row");
    assert!(spread_row.trim_end().ends_with('—') && !spread_row.contains('%'), "{spread_row}");
    // Chains are what the mixing figure compares; Laplace draws have none.
    let mixing = run(&mut session, "plot m mixing\n");
    let error = mixing.error.expect("the mixing figure needs a NUTS fit").describe();
    assert!(error.contains("laplace") && error.contains("fit m"), "{error}");
    assert!(mixing.displays.iter().all(|d| d.svg.is_none()));
}

#[test]
fn a_level_left_empty_or_nearly_by_a_filter_is_named_in_a_warning() {
    let dir = std::env::temp_dir().join(format!("wp-cells-sparse-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    orchard_csv(&dir);
    let mut session = Session::new(&dir);
    // Every dwarf tree has a girth of 25 cm or less, so the filter empties that level
    // and leaves four standard trees.
    let out = run(
        &mut session,
        "table trees from \"trees.csv\":\n    rootstock: category(dwarf, standard)\n    keep where girth > 25\n\
         model m:\n    yield from rootstock using trees\n",
    );
    assert!(out.error.is_none(), "{:?}", out.error);
    let model = &out.displays[1];
    assert!(model.plain.contains("level dwarf of rootstock has no rows in table trees"), "{}", model.plain);
    assert!(model.plain.contains("level standard of rootstock has only 4 rows"), "{}", model.plain);
    let notes = model.json.as_ref().unwrap()["notes"].as_array().unwrap();
    assert!(notes.iter().any(|n| n.as_str().unwrap().contains("rest on the priors alone")));
    // A table with enough rows in every level gets no such warning.
    let out = run(&mut session, "model m2:\n    yield from girth using trees\n");
    assert!(!out.displays[0].plain.contains("warning: level"), "{}", out.displays[0].plain);
}

#[test]
fn fitting_a_model_that_does_not_exist_names_what_does() {
    let mut session = Session::new(".");
    let out = run(&mut session, "fit nothing_here\n");
    let err = out.error.unwrap();
    assert_eq!(err.line, Some(1));
    assert!(err.message.contains("no model named nothing_here"), "{}", err.message);
}

#[test]
fn save_figure_writes_the_latest_figure_as_well_formed_svg() {
    let dir = std::env::temp_dir().join(format!("wp-cells-save-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let mut session = Session::new(&dir);
    let out = run(&mut session, "save figure to \"none.svg\"\n");
    assert!(out.error.unwrap().message.contains("no figure"));
    let out = run(&mut session, "graph g:\n    a -> b\nsave figure to \"g.svg\"\n");
    assert!(out.error.is_none(), "{:?}", out.error);
    let text = std::fs::read_to_string(dir.join("g.svg")).unwrap();
    // Well-formed XML per the XML 1.0 rules as implemented by roxmltree.
    let doc = roxmltree::Document::parse(&text).unwrap();
    let title = doc.descendants().find(|n| n.has_tag_name("title")).unwrap();
    assert_eq!(title.text(), Some("causal graph: g"));
}

#[test]
fn graph_from_a_dot_file_answers_like_the_same_graph_written_inline() {
    // Graphviz DOT language (graphviz.org/doc/info/lang.html): a digraph with
    // a chain, a quoted id and an attribute list that is ignored.
    let dir = std::env::temp_dir().join(format!("wp-cells-dot-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    std::fs::write(dir.join("g.dot"), "digraph orchard {\n  rootstock -> \"girth\" -> yield [color=red];\n  rootstock -> yield;\n}\n").unwrap();
    let mut session = Session::new(&dir);
    let out = run(
        &mut session,
        "graph from_file from \"g.dot\"\ngraph inline:\n    rootstock -> girth -> yield\n    rootstock -> yield\n\
         ask direct effect of rootstock on yield in from_file\nask direct effect of rootstock on yield in inline\n",
    );
    assert!(out.error.is_none(), "{:?}", out.error);
    let a = out.displays[2].json.as_ref().unwrap();
    let b = out.displays[3].json.as_ref().unwrap();
    assert_eq!(a["adjustment_sets"], b["adjustment_sets"]);
    // Single-door criterion (Pearl 2009, Thm 5.3.1): the mediator girth must be held.
    assert_eq!(a["adjustment_sets"], serde_json::json!([["girth"]]));
}

/// The README's "Statements" table is the contract: a header that misses a
/// connecting word is answered with its documented form, and the sampler
/// options named there (`chains`, `settle`, `draws`, `acceptance`,
/// `doublings`, `seed`) are the ones an unknown option is told about; an
/// option word of earlier versions is answered with the word that replaced it.
#[test]
fn malformed_headers_are_answered_with_their_documented_form() {
    let mut session = Session::new(".");
    let setup = "graph g:\n    z -> x -> y\n    z -> y\nsimulate field from g rows 30 seed 1:\n    z = normal(0, 1)\n    x = normal(z, 1)\n    y = normal(x + z, 1)\nmodel m:\n    y from x using field";
    assert!(run(&mut session, setup).error.is_none());
    let message = |session: &mut Session, cell: &str| run(session, cell).error.map(|e| e.message).unwrap_or_default();
    let cases = [
        ("ask total effect of x on y in g using", "ask total|direct effect of X on Y in GRAPH using TABLE"),
        ("compare routes for total effect of x on y g using field", "compare routes for total|direct effect of X on Y in GRAPH using TABLE"),
        ("implications of g checked field", "implications of GRAPH"),
        ("paths from x to y in g givn z", "paths from X to Y in GRAPH [given A, B]"),
        ("recover m field", "recover MODEL on SIMULATION"),
        ("calibrate m 20", "calibrate MODEL reps R [seed S]"),
        ("joint j = g field", "joint NAME = GRAPH using TABLE"),
        ("export m draws \"x.csv\"", "export NAME draws to \"FILE.csv\""),
    ];
    for (cell, form) in cases {
        let m = message(&mut session, cell);
        assert!(m.starts_with(&format!("cannot read \"{cell}\"; the form is: {form}")), "{cell}: {m}");
    }
    let m = message(&mut session, "fit m with nuts steps 3");
    assert!(m.starts_with("nuts takes chains, settle, draws, acceptance, doublings, mass, seed — not `steps`"), "{m}");
    for (old, new) in [("warmup", "settle"), ("accept", "acceptance"), ("depth", "doublings")] {
        let m = message(&mut session, &format!("fit m with nuts {old} 3"));
        assert!(m.starts_with(&format!("the nuts option `{old}` is now called `{new}`")), "{m}");
    }
    let m = message(&mut session, "calibrate m reps 20 seed 2 with laplace chains 2");
    assert!(m.starts_with("laplace takes `draws` and `seed`, not `chains`"), "{m}");
    let m = message(&mut session, "intervene j: set x 1 0, watch y");
    assert!(m.starts_with("cannot read `set x 1 0`; write `set X v1 vs v0`"), "{m}");
}

#[test]
fn export_and_save_never_overwrite_a_file_the_session_read_as_data() {
    let dir = std::env::temp_dir().join(format!("wp-cells-guard-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    orchard_csv(&dir);
    std::fs::write(dir.join("orchard.dot"), "digraph orchard { girth -> yield; }\n").unwrap();
    let before = std::fs::read(dir.join("trees.csv")).unwrap();
    let mut session = Session::new(&dir);
    let out = run(
        &mut session,
        "table trees from \"trees.csv\":\n    rootstock: category(dwarf, standard)\n    keep where girth > 0\n\
         model m:\n    yield from rootstock using trees\nfit m with laplace seed 5\ngraph g from \"orchard.dot\"\n",
    );
    assert!(out.error.is_none(), "{:?}", out.error);
    // The table's own CSV, spelled another way, and the DOT file read as a graph.
    for (cell, line) in [
        ("export m draws to \"./trees.csv\"\n", 1),
        ("graph h:\n    a -> b\nsave figure to \"orchard.dot\"\n", 3),
    ] {
        let err = run(&mut session, cell).error.expect("writing over data is refused");
        assert_eq!(err.line, Some(line), "{}", err.message);
        assert!(err.message.contains("read as data"), "{}", err.message);
    }
    assert_eq!(std::fs::read(dir.join("trees.csv")).unwrap(), before, "the data file is untouched");
    assert!(std::fs::read_to_string(dir.join("orchard.dot")).unwrap().starts_with("digraph"));
    // Another name is written, whole, with no temporary file left beside it.
    let out = run(&mut session, "export m draws to \"draws.csv\"\n");
    assert!(out.error.is_none(), "{:?}", out.error);
    let text = std::fs::read_to_string(dir.join("draws.csv")).unwrap();
    assert!(text.starts_with("chain,draw,"), "{text}");
    let leftovers: Vec<_> = std::fs::read_dir(&dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .filter(|n| n.ends_with(".partial"))
        .collect();
    assert!(leftovers.is_empty(), "{leftovers:?}");
}

/// Without the feature `on_disk`, `stay on disk` is refused with the feature
/// named and the build command, and no table is made.
#[cfg(not(feature = "on_disk"))]
#[test]
fn stay_on_disk_without_the_feature_is_refused_with_the_feature_named() {
    let dir = std::env::temp_dir().join(format!("waypath-stay-on-disk-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let mut session = Session::new(&dir);
    let outcome = run(&mut session, "table plots from \"plots.parquet\":\n    stay on disk");
    let error = outcome.error.expect("refused").to_string();
    assert!(error.contains("\"stay on disk\" needs a Waypath built with the cargo feature \"on_disk\""), "{error}");
    assert!(session.table("plots").is_none());
    let outcome = run(&mut session, "table plots from \"plots.parquet\":\n    stay on disk across machines at 127.0.0.1:50050");
    let error = outcome.error.expect("refused").to_string();
    assert!(error.contains("needs a Waypath built with the cargo feature \"across_machines\""), "{error}");
    assert!(session.table("plots").is_none());
}

/// README "Default priors": the coefficients' defaults are shares of one
/// budget, while the family's own parameter (here the spread, whose
/// default is `half_normal` of the outcome's sd) is set from the outcome;
/// the model table's `set by` column says which, row by row.
#[test]
fn the_model_table_says_which_defaults_come_from_the_shared_budget() {
    let dir = std::env::temp_dir().join(format!("wp-cells-set-by-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    orchard_csv(&dir);
    let mut session = Session::new(&dir);
    let out = run(
        &mut session,
        "table trees from \"trees.csv\":\n    keep where girth > 0\nmodel m:\n    yield from girth using trees\n    prior intercepts: normal(30, 10)\n",
    );
    assert!(out.error.is_none(), "{:?}", out.error);
    let plain = &out.displays[1].plain;
    let row = |group: &str| plain.lines().find(|l| l.starts_with(group)).unwrap_or_else(|| panic!("a {group} row in\n{plain}"));
    assert!(row("slopes").trim_end().ends_with("Waypath default (shared budget)"), "{plain}");
    assert!(row("spread").trim_end().ends_with("Waypath default (family parameter)"), "{plain}");
    assert!(row("intercepts").trim_end().ends_with("declared in the cell"), "{plain}");
}
