//! `score predictions of M1, M2, … [refits N]`: fitted models of one
//! outcome, on the same rows, scored by how well they predict rows left out
//! of their fit ([`crate::query::left_out`]), best first, with the rows
//! the estimate cannot handle named, and a plain word on what a score
//! cannot decide (the model of a causal question).

use serde_json::json;

use super::fitting::require_fit;
use super::grammar::{REFITS_WORD, SCORE};
use super::header;
use super::questions::{render, stopped_or};
use crate::cells::format::num;
use crate::cells::output::{CellError, Display, Grid};
use crate::cells::parse::Statement;
use crate::cells::session::{RunControl, Session};
use crate::infer::nuts::Progress;
use crate::limits::whole_number;
use crate::query::left_out::{score_predictions, PredictiveScores, DEFAULT_REFITS, MAX_REFITS};

/// The closing note: prediction does not choose a causal model.
pub(super) const PREDICTION_IS_NOT_CAUSATION: &str = "A better score means better prediction of rows like these; it does \
     not make a model the right one for a causal question. Which predictors an effect's model needs is decided by the \
     graph — the adjustment set that `ask total effect of X on Y in G` names — and a predictor that raises the score \
     (a mediator, a collider, a consequence of the outcome) can bias the effect.";

/// Rows hard to leave out named in a model's cell of the main table.
const ROWS_NAMED: usize = 8;
/// Rows hard to leave out listed per model in the table of them (the JSON
/// has every one).
const ROWS_LISTED: usize = 40;

/// The models named after `of`, and the `refits N` option.
fn read_names(rest: &str, line: usize) -> Result<(Vec<&str>, usize), CellError> {
    let words: Vec<&str> = rest.split([' ', '\t', ',']).filter(|w| !w.is_empty()).collect();
    let at = words.iter().position(|w| *w == REFITS_WORD).unwrap_or(words.len());
    let names = words[..at].to_vec();
    let refits = match &words[at..] {
        [] => DEFAULT_REFITS,
        [_, value] => whole_number(REFITS_WORD, value, 0, MAX_REFITS).map_err(|m| CellError::at(line, m))? as usize,
        _ => return Err(CellError::at(line, format!("`{REFITS_WORD}` is followed by one whole number and ends the line; the form is: {}", SCORE.usage))),
    };
    if names.is_empty() {
        return Err(CellError::at(line, format!("name the fitted models to score; the form is: {}", SCORE.usage)));
    }
    Ok((names, refits))
}

/// `score predictions of M1, M2, … [refits N]`.
pub(crate) fn score(session: &mut Session, st: &Statement, control: &RunControl, warnings: &mut Vec<String>) -> Result<Vec<Display>, CellError> {
    let line = st.header.number;
    let ([], rest) = header::<0>(st, &SCORE)?;
    let (names, refits) = read_names(rest, line)?;
    let mut entries = Vec::with_capacity(names.len());
    for name in &names {
        let fit = require_fit(session, name, line)?;
        entries.push((&session.models[*name], fit));
    }
    let label = format!("score predictions of {}", names.join(", "));
    let progress = |what: &str, p: Progress| {
        if p.iteration.is_multiple_of(100) || p.iteration == p.total {
            (control.progress)(&format!("{label}: refitting {what}, chain {} — iteration {}/{}", p.chain + 1, p.iteration, p.total));
        }
    };
    let scores = score_predictions(&entries, refits, control.cancel, &progress).map_err(|e| stopped_or(control, &label, line, e))?;
    for m in &scores.models {
        warnings.extend(m.refit_warnings.iter().map(|w| format!("{label}: {w}")));
    }
    Ok(vec![display(&scores)])
}

/// "17, 40 and 52".
fn row_list(rows: &[usize]) -> String {
    let text: Vec<String> = rows.iter().map(usize::to_string).collect();
    match text.split_last() {
        Some((last, rest)) if !rest.is_empty() => format!("{} and {last}", rest.join(", ")),
        _ => text.join(""),
    }
}

fn display(scores: &PredictiveScores) -> Display {
    let heading = format!(
        "scores of predictions for left-out rows: {} in table {}, {} rows; best first",
        scores.outcome, scores.table, scores.rows
    );
    let mut grid = Grid::new(&["model", "left-out score (se)", "shortfall from the best (se)", "seen-row score", "rows hard to leave out"])
        .numeric_columns(&[1, 2, 3]);
    let mut hard = Grid::new(&["model", "table row", "tail shape", "smoothed estimate", "exact, refitted without the row"])
        .numeric_columns(&[1, 2, 3, 4]);
    let mut lead = Vec::new();
    for (rank, m) in scores.models.iter().enumerate() {
        let shortfall = if rank == 0 { "0 (best)".to_string() } else { format!("{} ({})", num(m.shortfall), num(m.shortfall_standard_error)) };
        let rows: Vec<usize> = m.hard_rows.iter().map(|h| h.row).collect();
        let refitted = m.hard_rows.iter().all(|h| h.refitted);
        let rows_cell = match rows.len() {
            0 => "none".to_string(),
            n => format!(
                "{} {}{} ({})",
                if n == 1 { "row" } else { "rows" },
                row_list(&rows[..n.min(ROWS_NAMED)]),
                if n > ROWS_NAMED { format!(" and {} more", n - ROWS_NAMED) } else { String::new() },
                if refitted { "refitted" } else { "not refitted" }
            ),
        };
        if !rows.is_empty() && !refitted {
            lead.push(format!(
                "model {} has {} rows hard to leave out, more than the {} refitted per model: its score rests on \
                 estimates that cannot be trusted for them; write `{REFITS_WORD} {}` to refit each without its row",
                m.model,
                rows.len(),
                scores.refit_limit,
                rows.len()
            ));
        }
        grid.push(vec![
            m.model.clone(),
            format!("{} ({})", num(m.left_out_score), num(m.standard_error)),
            shortfall,
            num(m.seen_rows_score),
            rows_cell,
        ]);
        for h in m.hard_rows.iter().take(ROWS_LISTED) {
            hard.push(vec![m.model.clone(), h.row.to_string(), num(h.shape), num(h.smoothed), h.exact.map_or("not refitted".to_string(), num)]);
        }
        if m.hard_rows.len() > ROWS_LISTED {
            let more = m.hard_rows.len() - ROWS_LISTED;
            hard.push(vec![m.model.clone(), format!("{more} more (in the JSON)"), String::new(), String::new(), String::new()]);
        }
    }
    let limit = crate::model::prior::short_number(scores.shape_limit);
    let notes = vec![
        "left-out score: the sum over the rows of the log density a model gives a row's observed outcome when that row \
         is left out of the fit, estimated from the fit's draws by Pareto-smoothed importance sampling (Vehtari, Gelman \
         & Gabry 2017; Vehtari, Simpson, Gelman, Yao & Gabry 2024); higher predicts better. Its standard error is √n \
         times the sd of the rows' values"
            .to_string(),
        "shortfall: the best model's score less this one's; its standard error comes from the row-by-row differences, so \
         it is smaller than either score's own when the models miss the same rows. A shortfall within about twice its \
         standard error does not separate the models"
            .to_string(),
        "seen-row score: the same sum with every row kept in the fit; how far it lies above the left-out score shows how \
         much the fit leans on the rows it is scored on"
            .to_string(),
        format!(
            "rows hard to leave out: the importance ratios of the row have a generalised Pareto tail shape above {limit} \
             (Zhang & Stephens 2009 fit), where the estimate is unreliable; when a model has at most {} such rows \
             (`{REFITS_WORD} N` sets how many) each is refitted without the row by the fit's own method and seed, and \
             that exact value is used",
            scores.refit_limit
        ),
        format!(
            "rows are numbered as table {} holds them (after its `drop missing` and `keep where` rules), the first row 1",
            scores.table
        ),
        PREDICTION_IS_NOT_CAUSATION.to_string(),
    ];
    let mut grids: Vec<(&str, &Grid)> = vec![("", &grid)];
    if !hard.rows.is_empty() {
        grids.push(("rows hard to leave out:", &hard));
    }
    let (plain, html) = render(&heading, &lead, &grids, &notes);
    let mut json = serde_json::to_value(scores).unwrap_or(serde_json::Value::Null);
    json["notes"] = json!(notes);
    Display { plain, html: Some(html), svg: None, json: Some(json) }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_and_the_refit_option_are_read() {
        assert_eq!(read_names("a, b refits 3", 1).unwrap(), (vec!["a", "b"], 3));
        assert_eq!(read_names("a,b", 1).unwrap(), (vec!["a", "b"], DEFAULT_REFITS));
        assert!(read_names("refits 3", 1).unwrap_err().message.contains("name the fitted models"));
        assert!(read_names("a refits 1000", 1).unwrap_err().message.contains("from 0 to 100"));
        assert!(read_names("a refits 2 b", 1).unwrap_err().message.contains("ends the line"));
    }

    #[test]
    fn row_lists_read_as_words() {
        assert_eq!(row_list(&[17]), "17");
        assert_eq!(row_list(&[17, 40, 52]), "17, 40 and 52");
    }
}
