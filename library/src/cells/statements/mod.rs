//! One function per statement family; [`run`] dispatches on the first word.

mod causal;
mod data;
mod fitting;

use super::output::{CellError, Display};
use super::parse::Statement;
use super::session::{edit_distance, RunControl, Session};

/// The first words that start a statement, for error messages and completion.
pub const KEYWORDS: &[&str] =
    &["table", "graph", "ask", "paths", "implications", "model", "fit", "show", "export", "plot", "save"];

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
        "save" => save_figure(session, st),
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

/// `save figure to "FILE.svg"`: write the most recent figure of the session.
fn save_figure(session: &mut Session, st: &Statement) -> Result<Vec<Display>, CellError> {
    const FORM: &str = "save figure to \"FILE.svg\"";
    let path = st
        .head()
        .strip_prefix("save figure to")
        .and_then(|p| unquote(p.trim()))
        .ok_or_else(|| form_error(st, FORM))?;
    let svg = session.last_figure.clone().ok_or_else(|| {
        CellError::at(st.header.number, "no figure has been drawn in this session yet; run a statement that draws one first")
    })?;
    let file = session.resolve(path);
    std::fs::write(&file, &svg).map_err(|e| CellError::at(st.header.number, format!("cannot write {path} ({e})")))?;
    Ok(vec![Display::text(format!("saved the latest figure ({} KB) to {path}", svg.len().div_ceil(1024)))])
}
