//! What the kernel says about code without running it: whether a cell is
//! complete, completions at the cursor, a description of a named object,
//! and the input history. Pure functions of the text and the session, so
//! they are tested without sockets.

use serde_json::{json, Value};
use waypath::cells::parse::{is_incomplete, split_statements};
use waypath::cells::statements::body_grammar::{body_next_words, Block};
use waypath::cells::statements::grammar::{next_words, statement_words, Names, Next, Wanted};
use waypath::cells::Session;
use waypath::model::spec::{PRIOR_FOR, PRIOR_LINE};
use waypath::table::Table;

use crate::rust_cells::{rust_source, RUST_MAGIC};

/// Indentation suggested for the next line of an open body.
const BODY_INDENT: &str = "    ";

/// The `is_complete_reply` content for `code`.
pub fn is_complete(code: &str) -> Value {
    if let Some(rust) = rust_source(code) {
        return if rust_is_open(rust) {
            json!({"status": "incomplete", "indent": BODY_INDENT})
        } else {
            json!({"status": "complete"})
        };
    }
    if split_statements(code).is_err() {
        return json!({"status": "invalid"});
    }
    if is_incomplete(code) {
        json!({"status": "incomplete", "indent": BODY_INDENT})
    } else {
        json!({"status": "complete"})
    }
}

/// Whether Rust code has more opening than closing brackets (outside
/// string literals and line comments).
fn rust_is_open(code: &str) -> bool {
    let mut depth = 0i64;
    for line in code.lines() {
        let mut in_string = false;
        let mut escaped = false;
        let mut previous = ' ';
        for c in line.chars() {
            if in_string {
                match c {
                    _ if escaped => escaped = false,
                    '\\' => escaped = true,
                    '"' => in_string = false,
                    _ => {}
                }
            } else {
                match c {
                    '"' => in_string = true,
                    '/' if previous == '/' => break,
                    '(' | '[' | '{' => depth += 1,
                    ')' | ']' | '}' => depth -= 1,
                    _ => {}
                }
            }
            previous = c;
        }
    }
    depth > 0
}

/// The `complete_reply` content: statement words at the start of a line;
/// in a header, the connecting words and symbols its statement's grammar
/// allows next (`from`, `given`, `using`, `with`, `:`, `,`, sampler options
/// …); in a body line of a `model`, `joint`, `table`, `simulate` or `graph`
/// block, the words its parser allows next (`family`, `per`, `category(`,
/// `keep where`, comparison operators, `normal(`, `hidden`, `->` …); and,
/// where a value fits, the names that fit the place: tables where a table
/// goes, models where a model goes, the columns of the header's table or
/// model, the levels of the column just named, the nodes of the header's
/// graph — every name of the session where the place takes any. In Rust
/// cells, every name.
pub fn complete(session: &Session, code: &str, cursor_pos: usize) -> Value {
    let (before, start) = text_before(code, cursor_pos);
    let word = current_word(&before);
    let line_start = before.rsplit('\n').next().unwrap_or("");
    let at_statement_start = line_start.len() == word.len();
    let mut candidates: Vec<String> = if at_statement_start {
        statement_words().iter().map(|w| w.to_string()).chain([RUST_MAGIC.to_string()]).collect()
    } else {
        line_words(session, code, &before, &line_start[..line_start.len() - word.len()])
    };
    candidates.retain(|c| c.starts_with(word));
    candidates.sort();
    candidates.dedup();
    let cursor = start;
    json!({
        "status": "ok",
        "matches": candidates,
        "cursor_start": cursor - word.chars().count(),
        "cursor_end": cursor,
        "metadata": {},
    })
}

/// The text before the cursor (a position in characters, as protocol 5.2+
/// counts) and that position clamped to the text.
fn text_before(code: &str, cursor_pos: usize) -> (String, usize) {
    let before: String = code.chars().take(cursor_pos).collect();
    let n = before.chars().count();
    (before, n)
}

/// The word ending at the end of `before`: identifier-like (`%` included
/// so the Rust cell marker completes), or a run of symbol characters
/// (`-` of `->`, `<` of `<=`).
fn current_word(before: &str) -> &str {
    let run = |keep: fn(char) -> bool| {
        before.char_indices().rev().take_while(|(_, c)| keep(*c)).last().map(|(i, _)| i).unwrap_or(before.len())
    };
    let start = run(|c| c.is_alphanumeric() || c == '_' || c == '%');
    if start < before.len() {
        return &before[start..];
    }
    &before[run(|c| "-<>=!".contains(c))..]
}

/// Candidates inside a line that does not start a statement: `typed` is
/// the line before the word being completed. A header line gets what its
/// grammar allows next, a body line what the parser of its block allows;
/// a Rust cell, a body of another block, or a line no grammar reads gets
/// every session name.
fn line_words(session: &Session, code: &str, before: &str, typed: &str) -> Vec<String> {
    if rust_source(code).is_some() {
        return session_words(session);
    }
    let next = if typed.starts_with([' ', '\t']) {
        block_at(before).map(|block| body_next_words(block, typed)).unwrap_or_default()
    } else {
        next_words(typed)
    };
    if next == Next::default() {
        return session_words(session);
    }
    let mut words: Vec<String> = next.words.iter().map(|w| w.to_string()).collect();
    words.extend(next.calls.iter().map(|c| format!("{c}(")));
    if next.values && next.names.is_empty() {
        words.extend(session_words(session));
    }
    for wanted in &next.names {
        if wanted.names == Names::Parameter {
            words.extend(label_rests(session, before, typed));
        } else {
            words.extend(names_for(session, wanted));
        }
    }
    words
}

/// The rest of each parameter label of the model the block above declares
/// (`model NAME:`, built in the session by an earlier run of the cell)
/// after the part of the label typed so far on `prior for …`, so that a
/// label with spaces and brackets completes in one step.
fn label_rests(session: &Session, before: &str, typed: &str) -> Vec<String> {
    let Some(header) = header_line(before) else { return Vec::new() };
    let name = header.split_whitespace().nth(1).unwrap_or("").trim_end_matches(':');
    let Some(model) = session.model(name) else { return Vec::new() };
    let typed_label = typed.trim_start().strip_prefix(PRIOR_LINE).map(str::trim_start).and_then(|r| r.strip_prefix(PRIOR_FOR));
    let Some(typed_label) = typed_label.map(str::trim_start) else { return Vec::new() };
    // A steps term's shares take `dirichlet(α)`, a prior that is no `PriorUse`.
    let shares = model.step_terms().iter().map(|t| waypath::model::steps::shares_label(&t.column));
    model
        .priors_used()
        .iter()
        .flat_map(|u| u.parameters.iter().cloned())
        .chain(shares)
        .filter_map(|label| label.strip_prefix(typed_label).map(str::to_string))
        .collect()
}

/// The session's names of the kind `wanted` asks for.
fn names_for(session: &Session, wanted: &Wanted) -> Vec<String> {
    let objects = |kinds: &[&str]| -> Vec<String> {
        session.names().into_iter().filter(|(_, k)| kinds.contains(k)).map(|(n, _)| n).collect()
    };
    match wanted.names {
        Names::Any => session_words(session),
        Names::New | Names::Parameter => Vec::new(),
        Names::Table => objects(&["table"]),
        Names::Graph => objects(&["graph"]),
        Names::Model => objects(&["model", "joint model"]),
        Names::Column => tables_of(session, &wanted.of).iter().flat_map(|t| t.columns.iter().map(|c| c.name.clone())).collect(),
        Names::Node => {
            let named: Vec<&str> = wanted.of.iter().map(String::as_str).filter(|g| session.graph(g).is_some()).collect();
            let graphs = if named.is_empty() { objects(&["graph"]) } else { named.iter().map(|g| g.to_string()).collect() };
            graphs.iter().filter_map(|g| session.graph(g)).flat_map(|g| g.nodes().iter().map(|n| n.name.clone())).collect()
        }
        Names::Level => {
            let Some((column, sources)) = wanted.of.split_first() else { return Vec::new() };
            tables_of(session, sources)
                .iter()
                .filter_map(|t| t.column(column))
                .flat_map(|c| c.data.levels().unwrap_or(&[]).iter().cloned())
                .collect()
        }
    }
}

/// The tables behind the tables or models `named` (every table of the
/// session when none of them is known).
fn tables_of<'s>(session: &'s Session, named: &[String]) -> Vec<&'s Table> {
    let found: Vec<&Table> = named.iter().filter_map(|n| session.table(n).or_else(|| session.table_of(n))).collect();
    if !found.is_empty() {
        return found;
    }
    session.names().into_iter().filter(|(_, k)| *k == "table").filter_map(|(n, _)| session.table(&n)).collect()
}

/// The block whose body the cursor is in: the statement of the nearest
/// header line (one that is not indented) above the cursor's line.
fn block_at(before: &str) -> Option<Block> {
    Block::of_header(header_line(before)?)
}

/// The nearest header line (one that is not indented) above the cursor's line.
fn header_line(before: &str) -> Option<&str> {
    before.lines().rev().skip(1).find(|l| !l.trim().is_empty() && !l.starts_with([' ', '\t']))
}

/// Every name a cell could refer to: objects, columns, category levels.
fn session_words(session: &Session) -> Vec<String> {
    let mut words = Vec::new();
    for (name, kind) in session.names() {
        if kind == "table" {
            if let Some(table) = session.table(&name) {
                for column in &table.columns {
                    words.push(column.name.clone());
                    words.extend(column.data.levels().unwrap_or(&[]).iter().cloned());
                }
            }
        }
        if kind == "graph" {
            if let Some(graph) = session.graph(&name) {
                words.extend(graph.nodes().iter().map(|n| n.name.clone()));
            }
        }
        words.push(name);
    }
    words
}

/// The `inspect_reply` content: what the word under the cursor names.
pub fn inspect(session: &Session, code: &str, cursor_pos: usize) -> Value {
    inspect_reply(describe(session, &word_at(code, cursor_pos)))
}

/// The word (letters, digits, `_`) around the cursor.
pub fn word_at(code: &str, cursor_pos: usize) -> String {
    let (before, _) = text_before(code, cursor_pos);
    let after: String = code.chars().skip(cursor_pos).take_while(|c| c.is_alphanumeric() || *c == '_').collect();
    format!("{}{after}", current_word(&before))
}

/// The `inspect_reply` content for a description, or for nothing found.
pub fn inspect_reply(text: Option<String>) -> Value {
    match text {
        Some(text) => json!({"status": "ok", "found": true, "data": {"text/plain": text}, "metadata": {}}),
        None => json!({"status": "ok", "found": false, "data": {}, "metadata": {}}),
    }
}

/// A plain-text description of a session object, a column or a statement word.
fn describe(session: &Session, word: &str) -> Option<String> {
    if let Some(table) = session.table(word) {
        return Some(describe_table(table));
    }
    if let Some(graph) = session.graph(word) {
        let hidden: Vec<&str> = graph.nodes().iter().filter(|n| n.hidden).map(|n| n.name.as_str()).collect();
        let edges: Vec<String> = graph.edges().iter().map(|(a, b)| format!("{a} -> {b}")).collect();
        let mut text = format!("graph {word}: {} nodes, {} edges\n", graph.nodes().len(), edges.len());
        if !hidden.is_empty() {
            text.push_str(&format!("hidden: {}\n", hidden.join(", ")));
        }
        for edge in edges {
            text.push_str(&format!("    {edge}\n"));
        }
        return Some(text);
    }
    if let Some(model) = session.names().iter().find(|(n, k)| n == word && *k == "model") {
        return Some(describe_model(session, &model.0));
    }
    for (name, kind) in session.names() {
        if kind != "table" {
            continue;
        }
        if let Some(column) = session.table(&name).and_then(|t| t.column(word)) {
            return Some(format!("column {word} of table {name}: {}", column.describe_kind()));
        }
    }
    statement_words().contains(&word).then(|| format!("{word}: a statement; run a cell starting with \"{word}\" to use it"))
}

fn describe_model(session: &Session, name: &str) -> String {
    match session.fit(name) {
        Some(fit) => {
            let draws = &fit.draws;
            format!(
                "model {name}: fitted ({}), {} draws from {} chain{} of {} parameters\n    {}\n",
                fit.method.name(),
                draws.chains * draws.per_chain,
                draws.chains,
                if draws.chains == 1 { "" } else { "s" },
                draws.names.len(),
                draws.names.join(", ")
            )
        }
        None => format!("model {name}: not fitted yet; run `fit {name}`\n"),
    }
}

fn describe_table(table: &Table) -> String {
    let mut text = format!("table {}: {} rows, {} columns\n", table.name, table.nrows(), table.columns.len());
    for column in &table.columns {
        text.push_str(&format!("    {}: {}\n", column.name, column.describe_kind()));
    }
    text
}

/// One stored input (and the plain text of its result, if any).
#[derive(Debug, Clone)]
pub struct HistoryEntry {
    pub line: u64,
    pub input: String,
    pub output: Option<String>,
}

/// The `history_reply` content for a request's content. Session 0 is the
/// running session (the only one this kernel keeps).
pub fn history(entries: &[HistoryEntry], request: &Value) -> Value {
    let output = request["output"].as_bool().unwrap_or(false);
    let n = request["n"].as_u64().map(|n| n as usize);
    let chosen: Vec<&HistoryEntry> = match request["hist_access_type"].as_str().unwrap_or("tail") {
        "range" => {
            let start = request["start"].as_u64().unwrap_or(1);
            let stop = request["stop"].as_u64().filter(|&s| s > 0).unwrap_or(u64::MAX);
            entries.iter().filter(|e| e.line >= start && e.line < stop).collect()
        }
        "search" => {
            let pattern = request["pattern"].as_str().unwrap_or("*");
            let mut found: Vec<&HistoryEntry> = entries.iter().filter(|e| glob_match(pattern, &e.input)).collect();
            if request["unique"].as_bool().unwrap_or(false) {
                let mut seen = std::collections::HashSet::new();
                found.reverse();
                found.retain(|e| seen.insert(e.input.clone()));
                found.reverse();
            }
            last_n(found, n)
        }
        _ => last_n(entries.iter().collect(), n),
    };
    let history: Vec<Value> = chosen
        .iter()
        .map(|e| if output { json!([0, e.line, [e.input, e.output]]) } else { json!([0, e.line, e.input]) })
        .collect();
    json!({"status": "ok", "history": history})
}

fn last_n(entries: Vec<&HistoryEntry>, n: Option<usize>) -> Vec<&HistoryEntry> {
    let n = n.unwrap_or(entries.len());
    let skip = entries.len().saturating_sub(n);
    entries.into_iter().skip(skip).collect()
}

/// Shell-style glob: `*` any run of characters, `?` one character.
fn glob_match(pattern: &str, text: &str) -> bool {
    let p: Vec<char> = pattern.chars().collect();
    let t: Vec<char> = text.chars().collect();
    let (mut pi, mut ti) = (0, 0);
    let mut star: Option<(usize, usize)> = None;
    while ti < t.len() {
        if pi < p.len() && (p[pi] == '?' || p[pi] == t[ti]) {
            pi += 1;
            ti += 1;
        } else if pi < p.len() && p[pi] == '*' {
            star = Some((pi, ti));
            pi += 1;
        } else if let Some((sp, st)) = star {
            pi = sp + 1;
            ti = st + 1;
            star = Some((sp, st + 1));
        } else {
            return false;
        }
    }
    p[pi..].iter().all(|&c| c == '*')
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn glob_follows_shell_rules() {
        // POSIX fnmatch semantics for * and ? (Python's fnmatch.fnmatchcase
        // gives the same answers for these cases).
        assert!(glob_match("*paths*", "paths from a to b in g"));
        assert!(glob_match("g?aph*", "graph g:"));
        assert!(!glob_match("paths", "paths from a"));
        assert!(glob_match("*", ""));
    }

    #[test]
    fn an_open_body_asks_for_an_indented_line() {
        assert_eq!(is_complete("graph g:")["status"], "incomplete");
        assert_eq!(is_complete("graph g:")["indent"], "    ");
        assert_eq!(is_complete("paths from a to b in g")["status"], "complete");
        assert_eq!(is_complete("    graph g")["status"], "invalid");
        assert_eq!(is_complete("%%rust\nfn f() {")["status"], "incomplete");
        assert_eq!(is_complete("%%rust\nlet s = \"{\";")["status"], "complete");
    }

    /// The words offered after `typed` (the cursor at its end).
    fn offered(session: &Session, typed: &str) -> Vec<String> {
        let reply = complete(session, typed, typed.chars().count());
        serde_json::from_value(reply["matches"].clone()).unwrap()
    }

    /// The connecting words of the README's "Statements" table: each form
    /// there, cut before a connecting word, is offered that word.
    #[test]
    fn connecting_words_of_the_documented_forms_complete_in_headers() {
        let session = Session::new(".");
        let cases: &[(&str, &[&str])] = &[
            ("table orchard ", &["from"]),
            ("graph g ", &["from"]),
            ("paths ", &["from"]),
            ("paths from a ", &["to"]),
            ("paths from a to b ", &["in"]),
            ("paths from a to b in g ", &["given"]),
            ("ask ", &["direct", "total"]),
            ("ask total effect ", &["of"]),
            ("ask total effect of x on y in g ", &["using"]),
            // README: `ask … using T [checking zero] [at M v, …] [pooling C …] [intervals P%] [with …]`.
            ("ask total effect of x on y in g using t ", &["at", "checking", "intervals", "pooling", "varying", "with"]),
            ("implications of g ", &["checked"]),
            ("implications of g checked ", &["against"]),
            ("joint j ", &["="]),
            ("joint j = g ", &["using"]),
            ("simulate s from g ", &["rows"]),
            ("simulate s from g rows 50 ", &["seed"]),
            ("recover m ", &["on"]),
            ("calibrate m ", &["reps"]),
            ("calibrate m reps 40 ", &["seed", "with"]),
            ("export m ", &["draws"]),
            ("export m draws ", &["to"]),
            ("save ", &["figure"]),
            ("prior ", &["check"]),
            ("check m ", &["seed", "sets"]),
            ("intervene j: set x 1 ", &["vs"]),
            ("intervene j: set x 1 vs 0 ", &["watch"]),
            ("fit m ", &["intervals", "with"]),
            ("fit m with ", &["laplace", "nuts"]),
            // README: NUTS options `chains`, `settle`, `draws`, `acceptance`, `doublings`, `mass`, `seed`.
            ("fit m with nuts ", &["acceptance", "chains", "doublings", "draws", "mass", "seed", "settle"]),
            ("fit m with nuts chains 2 ", &["acceptance", "doublings", "draws", "mass", "seed", "settle"]),
            ("fit m with laplace ", &["draws", "seed"]),
            // README: scales `on means|outcomes|scores|log-times|medians|events by T|quantile Q`.
            ("contrast m: x 1 vs 0 on ", &["events", "log-times", "means", "medians", "outcomes", "quantile", "scores"]),
            // `on events by T`: only `by` goes on; `on quantile Q` takes a share (no session names here).
            ("contrast m: x 1 vs 0 on events ", &["by"]),
            ("contrast m: x 1 vs 0 on quantile ", &[]),
            ("contrast m: x along z ", &["from"]),
            ("contrast m: x over ", &["rows"]),
            ("contrast m: x 1 ", &["along", "at", "by", "intervals", "on", "over", "seed", "vs"]),
            ("compare routes for total effect of x on y in g using t ", &["intervals", "setting", "with"]),
            // README: `score predictions of M1, M2 … [refits N]`.
            ("score ", &["predictions"]),
            ("score predictions ", &["of"]),
            ("score predictions of a, b ", &[",", "refits"]),
            // a symbol the form takes next: `contrast M: X`, `joint NAME = G`
            ("contrast m ", &[":"]),
            ("robustness of m ", &[":"]),
        ];
        for (typed, want) in cases {
            assert_eq!(offered(&session, typed), *want, "after {typed:?}");
        }
        assert_eq!(offered(&session, "paths from a to b in g gi"), ["given"]);
        assert_eq!(offered(&session, "fit m with nuts se"), ["seed", "settle"]);
    }

    /// Where a header takes a value, the session's names are offered with
    /// any connecting word that may start an option.
    #[test]
    fn value_places_offer_session_names_and_option_words() {
        let mut session = Session::new(".");
        let cancel = std::sync::atomic::AtomicBool::new(false);
        let progress = |_: &str| {};
        let control = waypath::cells::RunControl { cancel: &cancel, progress: &progress };
        let out = session.run_cell("graph orchard:\n    girth -> yield\n    rootstock -> girth", &control);
        assert!(out.error.is_none(), "{:?}", out.error);
        assert_eq!(offered(&session, "paths from gi"), ["girth"]);
        assert_eq!(offered(&session, "paths from girth to yield in orchard given r"), ["rootstock"]);
        // README: `paths from X to Y in G [given A, B]` — after G only `given`, after `given` nodes
        assert_eq!(offered(&session, "paths from girth to yield in orchard "), ["given"]);
        // a node goes there: the nodes of the graph named, not the graph itself
        assert_eq!(offered(&session, "paths from girth to yield in orchard given "), ["girth", "rootstock", "yield"]);
        assert_eq!(offered(&session, "paths from girth to yield in orchard given rootstock, "), ["girth", "rootstock", "yield"]);
        assert_eq!(offered(&session, "paths from girth to yield in orchard given rootstock "), [",", "girth", "rootstock", "yield"]);
        // README: `contrast M: X b vs a …` — the settings b and a are values (levels)
        session.put_table("trees", waypath::table::Table {
            name: "trees".into(),
            columns: vec![waypath::table::Column::new(
                "rootstock",
                waypath::table::ColumnData::Category { codes: vec![0, 1], levels: vec!["dwarf".into(), "standard".into()] },
            )],
        });
        assert_eq!(offered(&session, "contrast m: rootstock sta"), ["standard"]);
        assert_eq!(offered(&session, "contrast m: rootstock standard vs dw"), ["dwarf"]);
        // body lines are not headers: names only
        assert_eq!(offered(&session, "graph g:\n    gi"), ["girth"]);
        // the reply replaces the partial word (Jupyter messaging: cursor_start..cursor_end)
        let reply = complete(&session, "paths from a to b in g giv", 26);
        assert_eq!((reply["cursor_start"].as_u64(), reply["cursor_end"].as_u64()), (Some(23), Some(26)));
    }

    /// README "Statements": each value place takes one kind of name — a
    /// table after `using` and `against`, a model after `fit`, `contrast`
    /// and `check`, a graph after `in`, the columns of the model's (or the
    /// header's) table, the levels of the column just named, the nodes of
    /// the header's graph — and a new name (`model NAME:`) is offered none.
    #[test]
    fn value_places_offer_only_the_names_that_fit() {
        let mut session = orchard_session();
        let cancel = std::sync::atomic::AtomicBool::new(false);
        let progress = |_: &str| {};
        let control = waypath::cells::RunControl { cancel: &cancel, progress: &progress };
        let out = session.run_cell("graph orchard:\n    rootstock -> girth -> yield\nmodel m:\n    girth from rootstock using trees", &control);
        assert!(out.error.is_none(), "{:?}", out.error.map(|e| e.describe()));
        let cases: &[(&str, &[&str])] = &[
            ("fit ", &["m"]),
            ("check ", &["m"]),
            ("contrast ", &["m"]),
            ("model ", &[]),
            ("contrast m: ", &["girth", "rootstock"]),
            ("contrast m: rootstock ", &["along", "at", "by", "dwarf", "intervals", "on", "over", "seed", "standard"]),
            // the levels of rootstock (the form without `vs` still lists its options)
            ("contrast m: rootstock standard vs ", &["along", "at", "by", "dwarf", "intervals", "on", "over", "seed", "standard"]),
            ("contrast m: girth at ", &["girth", "rootstock"]),
            ("contrast m: girth at rootstock ", &["dwarf", "standard"]),
            ("plot m lines over ", &["girth", "rootstock"]),
            ("implications of ", &["orchard"]),
            ("implications of orchard checked against ", &["trees"]),
            ("ask total effect of ", &["girth", "rootstock", "yield"]),
            ("ask total effect of rootstock on yield in ", &["orchard"]),
            ("ask total effect of rootstock on yield in orchard using ", &["trees"]),
            ("ask direct effect of rootstock on yield in orchard using trees at girth ", &[]),
            ("ask direct effect of rootstock on yield in orchard using trees pooling ", &["girth", "rootstock"]),
            ("joint j = ", &["orchard"]),
            ("joint j = orchard using ", &["trees"]),
        ];
        for (typed, want) in cases {
            assert_eq!(offered(&session, typed), *want, "after {typed:?}");
        }
    }

    /// README "Statements", `graph NAME:` (`hidden soil -> girth`, `a -> b
    /// -> c`, `rootstock, soil -> girth`) and `keep where` conditions
    /// (`=`, `!=`, `<`, `<=`, `>`, `>=`): the symbols and words of the
    /// graph and condition parsers, offered where they fit.
    #[test]
    fn graph_bodies_and_conditions_offer_their_symbols() {
        let session = Session::new(".");
        assert_eq!(offered_in(&session, "graph g:", ""), ["hidden"]);
        assert_eq!(offered_in(&session, "graph g:", "hid"), ["hidden"]);
        assert_eq!(offered_in(&session, "graph g:", "soil "), [",", "->"]);
        assert_eq!(offered_in(&session, "graph g:", "hidden soil -"), ["->"]);
        assert_eq!(offered_in(&session, "graph g:", "soil -> "), Vec::<String>::new());
        assert_eq!(offered_in(&session, "graph g:", "soil, "), Vec::<String>::new());
        let header = "table trees from \"orchard.csv\":";
        assert_eq!(offered_in(&session, header, "keep where girth "), ["!=", "<", "<=", "=", ">", ">="]);
        assert_eq!(offered_in(&session, header, "keep where girth <"), ["<", "<="]);
        // the reply replaces the symbols typed (cursor_start before the `-`)
        let typed = "graph g:\n    a -";
        let reply = complete(&session, typed, typed.chars().count());
        assert_eq!(reply["cursor_start"].as_u64(), Some(typed.chars().count() as u64 - 1));
    }

    /// The words offered in a body line of the block `header` opens.
    fn offered_in(session: &Session, header: &str, line: &str) -> Vec<String> {
        offered(session, &format!("{header}\n    {line}"))
    }

    /// A session with the orchard table of the README's examples: columns
    /// girth (real) and rootstock (category dwarf, standard).
    fn orchard_session() -> Session {
        use waypath::table::{Column, ColumnData, Table};
        let mut session = Session::new(".");
        session.put_table("trees", Table {
            name: "trees".into(),
            columns: vec![
                Column::new("girth", ColumnData::Real(vec![20.0, 31.0])),
                Column::new("rootstock", ColumnData::Category { codes: vec![0, 1], levels: vec!["dwarf".into(), "standard".into()] }),
            ],
        });
        session
    }

    /// README "Statements", `model NAME:`: `yield from rootstock, girth per
    /// rootstock using trees`; `family bernoulli` (or `poisson`, `binomial
    /// out of n`, `levels`), `prior slopes: normal(0, 2)`, `centre off`.
    #[test]
    fn model_body_lines_offer_the_words_of_the_model_parser() {
        let empty = Session::new(".");
        let cases: &[(&str, &[&str])] = &[
            ("", &["centre", "family", "parameterise", "prior"]),
            ("family ", &["bernoulli", "beta", "binomial", "exponential", "gamma_poisson", "graded", "levels", "normal", "poisson", "weibull"]),
            ("family binomial ", &["out"]),
            ("family binomial out ", &["of"]),
            ("prior ", &["for", "gaps", "intercepts", "overdispersion", "pooled correlations", "pooled spreads", "precision", "shape", "slopes", "spread", "weights"]),
            ("prior pooled correlations: ", &["lkj("]),
            ("prior slopes: ", &["exponential(", "half_normal(", "inverse_gamma(", "lognormal(", "normal(", "student(", "uniform("]),
            ("prior for girth slope: ", &["exponential(", "half_normal(", "inverse_gamma(", "lognormal(", "normal(", "student(", "uniform("]),
            ("centre ", &["off", "on"]),
            ("yield ", &["from", "using"]),
            ("yield from rootstock ", &["per", "using"]),
            ("yield from rootstock, girth per rootstock ", &["using"]),
            // README "Pooled groups": `pooled block`, `pooled block with girth`,
            // `parameterise block centred|noncentred`.
            ("yield from girth, pooled block ", &["using", "with", "within"]),
            ("yield from girth, pooled plot within site ", &["using", "with"]),
            ("yield from girth, pooled block with girth ", &["using"]),
            ("yield from girth, po", &["pooled", "powers("]),
            ("parameterise block ", &["centred", "noncentred"]),
            ("yield from powers(girth, 2) ", &["using"]),
            ("yield from spline(girth, 5, ", &["knots"]),
            ("fam", &["family"]),
            ("yield from rootstock, pow", &["powers("]),
            ("yield from rootstock, ste", &["steps("]),
        ];
        for (line, want) in cases {
            assert_eq!(offered_in(&empty, "model m:", line), *want, "after {line:?}");
        }
        let session = orchard_session();
        // a value place keeps the names: columns and levels of the session's tables
        assert_eq!(offered_in(&session, "model m:", "yield from rootstock, gi"), ["girth"]);
        assert_eq!(offered_in(&session, "model m:", "yield from girth per r"), ["rootstock"]);
        assert_eq!(offered_in(&session, "model m:", "yield from girth using t"), ["trees"]);
        assert_eq!(offered_in(&session, "model m:", "family binomial out of gi"), ["girth"]);
        // the block is found above earlier body lines
        assert_eq!(offered(&empty, "model m:\n    yield from girth using trees\n    family bi"), ["binomial"]);
    }

    /// README "Statements", `joint NAME = G using T[:]`: body lines such as
    /// `girth from rootstock` (with `family …`, `prior …` below).
    #[test]
    fn joint_body_lines_offer_model_line_words() {
        let session = Session::new(".");
        let header = "joint j = orchard using trees:";
        assert_eq!(offered_in(&session, header, ""), ["centre", "family", "parameterise", "prior"]);
        assert_eq!(offered_in(&session, header, "girth "), ["from", "using"]);
        assert_eq!(offered_in(&session, header, "girth from rootstock "), ["per", "using"]);
        assert_eq!(offered(&session, &format!("{header}\n    girth from rootstock\n    family ")), ["bernoulli", "beta", "binomial", "exponential", "gamma_poisson", "graded", "levels", "normal", "poisson", "weibull"]);
    }

    /// README "Statements", `table NAME from "FILE.csv":`: `x: real in cm`,
    /// `c: category(a, b)`, `n: count`, `flag: binary`, `drop missing`,
    /// `keep where COND`, `stay on disk [across machines at HOST:PORT]`.
    #[test]
    fn table_body_lines_offer_the_words_of_the_table_parser() {
        let empty = Session::new(".");
        let header = "table trees from \"orchard.csv\":";
        let cases: &[(&str, &[&str])] = &[
            ("", &["drop", "keep", "stay"]),
            ("drop ", &["missing"]),
            ("stay ", &["on"]),
            ("stay on ", &["disk"]),
            ("stay on disk ", &["across"]),
            ("stay on disk across ", &["machines"]),
            ("stay on disk across machines ", &["at"]),
            ("keep ", &["where"]),
            ("x: ", &["binary", "category", "category(", "count", "real"]),
            ("x: real ", &["in"]),
            ("c: category(a, b) ", &["in"]),
            ("keep where ", &["not"]),
            ("keep where girth > 0 ", &["and", "or"]),
            ("keep where girth > 0 and ", &["not"]),
        ];
        for (line, want) in cases {
            assert_eq!(offered_in(&empty, header, line), *want, "after {line:?}");
        }
        let session = orchard_session();
        assert_eq!(offered_in(&session, header, "keep where girth > 0 and rootstock = st"), ["standard"]);
        assert_eq!(offered_in(&session, header, "gi"), ["girth"]);
    }

    /// README "Statements", `simulate NAME from G rows N seed S:`: `c =
    /// category(a 0.5, b 0.5)`, `x = normal(2 + 0.5 * z, 1)`, `f =
    /// bernoulli(logit = …)`, `n = poisson(log = …)`, and a pooled group's
    /// `departure(c, spread)` wherever a term may stand.
    #[test]
    fn simulate_body_lines_offer_mechanism_words() {
        let session = Session::new(".");
        let header = "simulate s from orchard rows 50 seed 7:";
        let cases: &[(&str, &[&str])] = &[
            ("x ", &["="]),
            ("x = ", &["bernoulli(", "beta(", "category(", "exponential(", "gamma_poisson(", "graded(", "levels(", "normal(", "poisson(", "weibull("]),
            ("f = bernoulli(", &["departure(", "exp(", "log(", "logit", "steps("]),
            ("n = poisson(", &["departure(", "exp(", "log", "log(", "steps("]),
            ("x = normal(2 + 0.5 * ", &["departure(", "exp(", "log(", "steps("]),
            ("x = no", &["normal("]),
        ];
        for (line, want) in cases {
            assert_eq!(offered_in(&session, header, line), *want, "after {line:?}");
        }
    }

    /// Every body-line example of the README's "Statements" table that its
    /// block's parser reads: at each word, the completion of that place
    /// offers the word, or the place takes a value. A word a parser gains
    /// without the completion knowing fails here.
    #[test]
    fn readme_body_examples_are_offered_word_by_word() {
        let readme = include_str!("../../../README.md");
        let blocks = [
            ("| `model NAME:`", Block::Model),
            ("| `joint NAME = G using T[:]`", Block::Joint),
            ("| `table NAME from \"FILE.csv\":`", Block::Table),
            ("| `simulate NAME from G rows N seed S:`", Block::Simulate),
        ];
        let mut checked = 0;
        for (row_start, block) in blocks {
            let row = readme.lines().find(|l| l.starts_with(row_start)).unwrap_or_else(|| panic!("README row {row_start}"));
            let examples: Vec<String> = row.split('`').skip(3).step_by(2).map(|e| e.replace('…', "1")).collect();
            for example in examples.iter().filter(|e| parses(block, e)) {
                for (at, word) in words_of_line(example) {
                    let next = body_next_words(block, &example[..at]);
                    let is_call = example[at + word.len()..].starts_with('(');
                    let fixed = if is_call { next.calls.contains(&word) } else { next.words.contains(&word) };
                    let free = next.values || next == Next::default();
                    assert!(fixed || (free && !is_call), "{example:?}: `{word}` not offered after {:?}: {next:?}", &example[..at]);
                    checked += 1;
                }
            }
        }
        assert!(checked >= 30, "only {checked} README words checked");
    }

    /// Whether the block's own parser reads `line` as a body line.
    fn parses(block: Block, line: &str) -> bool {
        match block {
            Block::Model | Block::Joint => waypath::model::parse_model_line(line).is_ok(),
            Block::Table => waypath::table::parse_table_line(line).is_ok(),
            Block::Simulate => matches!(waypath::query::parse_mechanism_line(line), Ok(Some(_))),
            Block::Graph => waypath::graph::GraphBuilder::new("g").add_line(line).is_ok(),
        }
    }

    /// The identifier-like words of a line (not numbers) with their offsets.
    fn words_of_line(line: &str) -> Vec<(usize, &str)> {
        let is_word_char = |c: char| c.is_alphanumeric() || c == '_';
        let mut out = Vec::new();
        let mut start = None;
        for (i, c) in line.char_indices().chain([(line.len(), ' ')]) {
            match (start, is_word_char(c)) {
                (None, true) => start = Some(i),
                (Some(s), false) => {
                    if !line[s..i].starts_with(|c: char| c.is_ascii_digit()) {
                        out.push((s, &line[s..i]));
                    }
                    start = None;
                }
                _ => {}
            }
        }
        out
    }

    #[test]
    fn statement_words_complete_at_the_start_of_a_line() {
        let session = Session::new(".");
        let reply = complete(&session, "pa", 2);
        assert_eq!(reply["matches"], json!(["paths"]));
        assert_eq!(reply["cursor_start"], 0);
        assert_eq!(reply["cursor_end"], 2);
    }

    /// README "Statements", `model NAME:`: `prior for girth slope:
    /// normal(0, 1)` — the label as the estimates table prints it. Once the
    /// cell has run, the model's labels complete there, the rest of a label
    /// after what is typed (labels hold spaces and brackets).
    #[test]
    fn prior_for_offers_the_labels_of_the_model_the_cell_declares() {
        use waypath::cells::RunControl;
        use waypath::table::{Column, ColumnData, Table};
        let mut session = Session::new(".");
        session.put_table("trees", Table {
            name: "trees".into(),
            columns: vec![
                Column::new("girth", ColumnData::Real(vec![20.0, 31.0, 25.0, 28.0])),
                Column::new("rootstock", ColumnData::Category { codes: vec![0, 1, 0, 1], levels: vec!["dwarf".into(), "standard".into()] }),
                Column::new("yield", ColumnData::Real(vec![21.0, 40.0, 27.5, 36.0])),
                Column::new("canopy", ColumnData::Category { codes: vec![0, 1, 2, 1], levels: vec!["low".into(), "mid".into(), "high".into()] })
                    .with_stated_order(),
            ],
        });
        let steps = "model s:\n    yield from steps(canopy) using trees\n";
        let (cancel, progress) = (std::sync::atomic::AtomicBool::new(false), |_: &str| {});
        assert!(session.run_cell(steps, &RunControl { cancel: &cancel, progress: &progress }).error.is_none());
        // a steps term: its whole effect (a normal prior) and its shares (dirichlet)
        assert_eq!(offered(&session, &format!("{steps}    prior for canopy s")), ["shares", "steps"]);
        let cell = "model m:\n    yield from rootstock, girth using trees\n";
        let (cancel, progress) = (std::sync::atomic::AtomicBool::new(false), |_: &str| {});
        assert!(session.run_cell(cell, &RunControl { cancel: &cancel, progress: &progress }).error.is_none());
        let at = |line: &str| offered(&session, &format!("{cell}    {line}"));
        assert_eq!(at("prior for "), ["girth slope", "rootstock[dwarf]", "rootstock[standard]", "spread"]);
        assert_eq!(at("prior for gi"), ["girth slope"]);
        assert_eq!(at("prior for girth s"), ["slope"]);
        assert_eq!(at("prior for rootstock["), ["dwarf]", "standard]"]);
        // another model's cell, or one not run yet, offers no labels
        assert!(offered(&session, "model other:\n    yield from girth using trees\n    prior for gi").is_empty());
    }

    /// README "Statements", `simulate`: a time's follow-up rule, `days =
    /// weibull(log = 2.5, 1.6) followed until uniform(8, 30) cut short by
    /// unsprouted`, offered word by word after the closing bracket.
    #[test]
    fn time_mechanisms_offer_their_follow_up_rule() {
        let session = Session::new(".");
        let header = "simulate s from orchard rows 50 seed 7:";
        let cases: &[(&str, &[&str])] = &[
            ("days = weibull(log = 2.5, 1.6) ", &["followed"]),
            ("days = exponential(12) ", &["followed"]),
            ("days = weibull(log = 2.5, 1.6) followed ", &["until"]),
            ("days = weibull(log = 2.5, 1.6) followed until un", &["uniform("]),
            ("days = weibull(log = 2.5, 1.6) followed until uniform(8, 30) ", &["cut"]),
            ("days = weibull(log = 2.5, 1.6) followed until 30 cut ", &["short"]),
            ("days = weibull(log = 2.5, 1.6) followed until 30 cut short ", &["by"]),
        ];
        for (line, want) in cases {
            assert_eq!(offered_in(&session, header, line), *want, "after {line:?}");
        }
        assert!(!offered_in(&session, header, "x = normal(1, 2) ").contains(&"followed".to_string()));
    }
}
