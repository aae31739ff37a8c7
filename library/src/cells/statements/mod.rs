//! One function per statement family; [`run`] dispatches on the first word.

mod causal;
mod data;
mod fitting;
mod questions;
mod simulation;

use super::output::{CellError, Display};
use super::parse::Statement;
use super::session::{edit_distance, RunControl, Session};

/// The first words that start a statement, for error messages and completion.
pub const KEYWORDS: &[&str] = &[
    "table", "graph", "ask", "paths", "implications", "model", "fit", "show", "export", "plot", "save", "contrast",
    "compare", "joint", "intervene", "simulate", "recover", "calibrate", "prior", "check",
];

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
        "ask" if has_word(head, "using") => questions::ask_using(session, st, control, warnings),
        "ask" => causal::ask(session, st),
        "paths" => causal::paths(session, st),
        "implications" if head.contains(" checked against ") => questions::implications_checked(session, st, control),
        "implications" => causal::implications(session, st),
        "contrast" => questions::contrast(session, st),
        "compare" => questions::compare_routes(session, st, control, warnings),
        "model" => fitting::model(session, st),
        "fit" if simulation::names_joint(session, head) => simulation::fit_joint(session, st, control, warnings),
        "fit" => fitting::fit(session, st, control, warnings),
        "joint" => simulation::joint(session, st),
        "intervene" => simulation::intervene(session, st),
        "simulate" => simulation::simulate(session, st),
        "recover" => simulation::recover(session, st, control, warnings),
        "calibrate" => simulation::calibrate(session, st, control),
        "prior" | "check" => simulation::predictive_check(session, st),
        "show" => fitting::show(session, st),
        "export" => fitting::export(session, st),
        "plot" => fitting::plot(session, st),
        "save" => save_figure(session, st),
        other => Err(unknown_statement(other, st.header.number)),
    }
}

/// Whether `word` appears as a whole word in `head`.
fn has_word(head: &str, word: &str) -> bool {
    head.split_whitespace().any(|w| w == word)
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

/// `KEYWORD NAME: REST` → (NAME, REST), for statements that name an object
/// before a colon (`contrast m: …`, `intervene j: …`).
pub(crate) fn named_header<'s>(st: &'s Statement, keyword: &str, form: &str) -> Result<(&'s str, &'s str), CellError> {
    let (left, right) = st.head().split_once(':').ok_or_else(|| form_error(st, form))?;
    match left.split_whitespace().collect::<Vec<_>>().as_slice() {
        [k, name] if *k == keyword => Ok((name, right)),
        _ => Err(form_error(st, form)),
    }
}
