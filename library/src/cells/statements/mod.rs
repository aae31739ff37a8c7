//! One function per statement family; [`run`] dispatches on the first word.

pub mod body_grammar;
mod causal;
mod data;
mod fitting;
mod further_routes;
pub mod grammar;
mod questions;
mod scoring;
mod sensitivity;
mod simulation;

use super::files::write_atomically;
use super::output::{CellError, Display};
use super::parse::Statement;
use super::session::{edit_distance, RunControl, Session};
use grammar::{statement_words, Form};

pub use fitting::parse_method;

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
        "table" => data::table(session, st, control),
        "graph" => causal::graph(session, st),
        "ask" if has_word(head, "using") => questions::ask_using(session, st, control, warnings),
        "ask" => causal::ask(session, st, control),
        "paths" => causal::paths(session, st, control),
        "implications" if head.contains(" checked against ") => questions::implications_checked(session, st, control),
        "implications" => causal::implications(session, st, control),
        "contrast" => questions::contrast(session, st),
        "compare" => questions::compare_routes(session, st, control, warnings),
        "robustness" => sensitivity::robustness(session, st, control),
        "score" => scoring::score(session, st, control, warnings),
        "model" => fitting::model(session, st, control),
        "fit" if simulation::names_joint(session, head) => simulation::fit_joint(session, st, control, warnings),
        "fit" => fitting::fit(session, st, control, warnings),
        "joint" => simulation::joint(session, st),
        "intervene" => simulation::intervene(session, st, control),
        "simulate" => simulation::simulate(session, st, control),
        "recover" => simulation::recover(session, st, control, warnings),
        "calibrate" => simulation::calibrate(session, st, control),
        "prior" | "check" => simulation::predictive_check(session, st),
        "show" => fitting::show(session, st),
        "export" => fitting::export(session, st),
        "plot" => fitting::plot(session, st),
        "save" => save_figure(session, st),
        "intervals" => interval_setting(session, st),
        other => Err(unknown_statement(other, st.header.number)),
    }
}

/// Whether `word` appears as a whole word in `head`.
fn has_word(head: &str, word: &str) -> bool {
    head.split_whitespace().any(|w| w == word)
}

fn unknown_statement(word: &str, line: usize) -> CellError {
    let keywords = statement_words();
    let near: Vec<&str> = keywords.iter().copied().filter(|k| edit_distance(k, word) <= 2).collect();
    let hint = if near.is_empty() {
        format!("statements start with one of: {}", keywords.join(", "))
    } else {
        format!("did you mean {}?", near.join(" or "))
    };
    CellError::at(line, format!("\"{word}\" does not start a statement; {hint}"))
}

/// Error for a header that does not match its statement's form.
pub(crate) fn form_error(st: &Statement, form: &str) -> CellError {
    CellError::at(st.header.number, format!("cannot read \"{}\"; the form is: {form}", st.head()))
}

/// The kept words and the options of a header read by `form`; a header
/// that does not fit gets the form's usage in its error.
pub(crate) fn header<'s, const N: usize>(st: &'s Statement, form: &Form) -> Result<([&'s str; N], &'s str), CellError> {
    form.read_n(st.head()).map_err(|_| form_error(st, form.usage))
}

/// The text after option word `word` when `rest` starts with it.
pub(crate) fn option_text<'s>(rest: &'s str, word: &str) -> Option<&'s str> {
    let (first, text) = rest.split_once(char::is_whitespace).unwrap_or((rest, ""));
    (first == word).then(|| text.trim())
}

/// An interval mass as written: a percentage (`80%`) strictly between 0%
/// and 100%, or a share (`0.8`) strictly between 0 and 1.
pub fn parse_mass(text: &str) -> Result<f64, String> {
    let wrong = || {
        format!(
            "`{text}` is not an interval mass; write a percentage between 0% and 100% (exclusive), e.g. 80%, \
             or a share between 0 and 1, e.g. 0.8"
        )
    };
    let mass = match text.strip_suffix('%') {
        Some(pct) => pct.trim().parse::<f64>().map_err(|_| wrong())? / 100.0,
        None => text.parse::<f64>().map_err(|_| wrong())?,
    };
    if mass.is_finite() && mass > 0.0 && mass < 1.0 { Ok(mass) } else { Err(wrong()) }
}

/// Take the `intervals P%` option out of a header's option text: its mass
/// (if written) and the text without it, for the statement's own option
/// reader. The sampler options after `with` never use the word.
pub(crate) fn interval_option(rest: &str, line: usize) -> Result<(Option<f64>, String), CellError> {
    let words: Vec<&str> = rest.split_whitespace().collect();
    let Some(at) = words.iter().position(|w| *w == grammar::INTERVALS_WORD) else {
        return Ok((None, rest.to_string()));
    };
    let value = words.get(at + 1).map(|v| v.trim_end_matches(',')).ok_or_else(|| {
        CellError::at(line, "`intervals` is followed by the interval's mass, e.g. `intervals 80%`")
    })?;
    let mass = parse_mass(value).map_err(|m| CellError::at(line, m))?;
    let kept: Vec<&str> = words[..at].iter().chain(&words[at + 2..]).copied().collect();
    if kept.contains(&grammar::INTERVALS_WORD) {
        return Err(CellError::at(line, "write `intervals` once"));
    }
    Ok((Some(mass), kept.join(" ")))
}

/// `intervals P%`: the mass of every interval from here on.
fn interval_setting(session: &mut Session, st: &Statement) -> Result<Vec<Display>, CellError> {
    let ([value], _) = header(st, &grammar::INTERVALS)?;
    let mass = parse_mass(value).map_err(|m| CellError::at(st.header.number, m))?;
    session.interval_setting = Some(mass);
    let pct = crate::model::prior::short_number(mass * 100.0);
    Ok(vec![Display::text(format!(
        "intervals from here on: the central {pct}% of the draws (a statement's own `intervals P%` option overrides it)"
    ))])
}

/// Strip surrounding double quotes from a path argument.
pub(crate) fn unquote(s: &str) -> Option<&str> {
    s.strip_prefix('"').and_then(|s| s.strip_suffix('"'))
}

/// `save figure to "FILE.svg"`: write the most recent figure of the session.
fn save_figure(session: &mut Session, st: &Statement) -> Result<Vec<Display>, CellError> {
    let ([path], _) = header(st, &grammar::SAVE)?;
    let path = unquote(path).ok_or_else(|| form_error(st, grammar::SAVE.usage))?;
    let svg = session.last_figure.clone().ok_or_else(|| {
        CellError::at(st.header.number, "no figure has been drawn in this session yet; run a statement that draws one first")
    })?;
    let file = session.output_path(path, st.header.number)?;
    write_atomically(&file, svg.as_bytes())
        .map_err(|e| CellError::at(st.header.number, format!("cannot write {path} ({e}); check that its folder exists and is writable")))?;
    Ok(vec![Display::text(format!("saved the latest figure ({} KB) to {path}", svg.len().div_ceil(1024)))])
}
