//! What the kernel says about code without running it: whether a cell is
//! complete, completions at the cursor, a description of a named object,
//! and the input history. Pure functions of the text and the session, so
//! they are tested without sockets.

use serde_json::{json, Value};
use waypath::cells::parse::{is_incomplete, split_statements};
use waypath::cells::statements::KEYWORDS;
use waypath::cells::Session;
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

/// The `complete_reply` content: statement words at the start of a line,
/// otherwise names of session objects, table columns and category levels.
pub fn complete(session: &Session, code: &str, cursor_pos: usize) -> Value {
    let (before, start) = text_before(code, cursor_pos);
    let word = current_word(&before);
    let line_start = before.rsplit('\n').next().unwrap_or("");
    let at_statement_start = line_start.len() == word.len();
    let mut candidates: Vec<String> = if at_statement_start {
        KEYWORDS.iter().map(|w| w.to_string()).chain([RUST_MAGIC.to_string()]).collect()
    } else {
        session_words(session)
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

/// The identifier-like word ending at the end of `before` (`%` included so
/// the Rust cell marker completes).
fn current_word(before: &str) -> &str {
    let start = before
        .char_indices()
        .rev()
        .take_while(|(_, c)| c.is_alphanumeric() || *c == '_' || *c == '%')
        .last()
        .map(|(i, _)| i)
        .unwrap_or(before.len());
    &before[start..]
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
    let (before, _) = text_before(code, cursor_pos);
    let after: String = code.chars().skip(cursor_pos).take_while(|c| c.is_alphanumeric() || *c == '_').collect();
    let word = format!("{}{after}", current_word(&before));
    match describe(session, &word) {
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
    KEYWORDS.contains(&word).then(|| format!("{word}: a statement; run a cell starting with \"{word}\" to use it"))
}

fn describe_model(session: &Session, name: &str) -> String {
    match session.fit(name) {
        Some(fit) => {
            let draws = &fit.draws;
            format!(
                "model {name}: fitted, {} chains × {} draws of {} parameters\n    {}\n",
                draws.chains,
                draws.per_chain,
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

    #[test]
    fn statement_words_complete_at_the_start_of_a_line() {
        let session = Session::new(".");
        let reply = complete(&session, "pa", 2);
        assert_eq!(reply["matches"], json!(["paths"]));
        assert_eq!(reply["cursor_start"], 0);
        assert_eq!(reply["cursor_end"], 2);
    }
}
