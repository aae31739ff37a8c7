//! One function per statement family; [`run`] dispatches on the first word.

mod causal;
mod data;
mod fitting;

use super::output::{CellError, Display};
use super::parse::Statement;
use super::session::{edit_distance, RunControl, Session};

/// The first words that start a statement, for error messages and completion.
pub const KEYWORDS: &[&str] =
    &["table", "graph", "ask", "paths", "implications", "model", "fit", "show", "export", "plot"];

/// Run one statement against the session.
pub(crate) fn run(
    session: &mut Session,
    st: &Statement,
    control: &RunControl,
    warnings: &mut Vec<String>,
) -> Result<Vec<Display>, CellError> {
    let head = st.head();
    let first = head.split_whitespace().next().unwrap_or("");
    if !st.expects_body() && matches!(first, "table" | "graph") && head.contains(':') {
        return Err(CellError::at(st.header.number, "a ':' may only end a header line"));
    }
    match first {
        "table" => data::table(session, st, warnings),
        "graph" => causal::graph(session, st),
        "ask" => causal::ask(session, st),
        "paths" => causal::paths(session, st),
        "implications" => causal::implications(session, st),
        "model" => fitting::model(session, st),
        "fit" => fitting::fit(session, st, control, warnings),
        "show" => fitting::show(session, st),
        "export" => fitting::export(session, st),
        "plot" => fitting::plot(session, st),
        other => Err(unknown_statement(other, st.header.number)),
    }
}

fn unknown_statement(word: &str, line: usize) -> CellError {
    let near: Vec<&str> = KEYWORDS.iter().copied().filter(|k| edit_distance(k, word) <= 2).collect();
    let hint = if near.is_empty() {
        format!("statements start with one of: {}", KEYWORDS.join(", "))
    } else {
        format!("did you mean {}?", near.join(" or "))
    };
    CellError::at(line, format!("\"{word}\" does not start a statement; {hint}"))
}

/// Error for a header that does not match its statement's form.
pub(crate) fn form_error(st: &Statement, form: &str) -> CellError {
    CellError::at(st.header.number, format!("cannot read \"{}\"; the form is: {form}", st.head()))
}

/// Strip surrounding double quotes from a path argument.
pub(crate) fn unquote(s: &str) -> Option<&str> {
    s.strip_prefix('"').and_then(|s| s.strip_suffix('"'))
}
