//! What may follow the words typed so far in a body line of a block
//! statement (`model`, `joint`, `table`, `simulate`, `graph`).
//!
//! Each body line is read by its own parser (`model::spec`, `table::rules`
//! and `table::condition`, `query::mechanism`); those parsers keep their
//! words as `pub const` lists, and this module reads the same lists, so a
//! word added to a parser is offered at the cursor without a second list
//! to keep in step. Names (columns, levels, nodes) are not known here:
//! [`Next::values`] says where one fits.

use super::grammar::{tokens, Names, Next, Wanted};
use crate::model::family::survival::{TimeForm, CAME_BY, CUT_SHORT_BY};
use crate::model::family::{BINOMIAL, FAMILY_WORDS, OUT_OF};
use crate::model::prior::PRIOR_DISTRIBUTIONS;
use crate::model::spec::{
    GroupLayout, CENTRE_LINE, CENTRINGS, FAMILY_LINE, FROM, KNOTS, LINE_WORDS, LKJ, PARAMETERISE_LINE, PER, POOLED,
    POOLED_CORRELATIONS, POOLED_WITH, POOLED_WITHIN, PRIOR_FOR, PRIOR_LINE, SPLINE, TERM_CALLS, USING,
};
use crate::model::PriorGroup;
use crate::query::mechanism::{
    BERNOULLI, CATEGORY as SHARES, DISTRIBUTIONS, EXPONENTIAL, FOLLOWED_UNTIL, FUNCTIONS, LOG, LOGIT, LOOKED_AT_EVERY, POISSON, UNIFORM,
    WEIBULL,
};
use crate::graph::{ARROW, HIDDEN};
use crate::table::condition::{Comparison, AND, NOT, OR};
use crate::table::rules::{ACROSS, AT, CATEGORY, DISK, DROP, IN, KEEP, KINDS, MACHINES, MISSING, ON, STAY, WHERE};

/// The block statements whose body lines have words of their own.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Block {
    Model,
    Joint,
    Table,
    Simulate,
    Graph,
}

impl Block {
    /// The block a header line opens, by its statement word.
    pub fn of_header(header: &str) -> Option<Block> {
        match header.split_whitespace().next()? {
            "model" => Some(Block::Model),
            "joint" => Some(Block::Joint),
            "table" => Some(Block::Table),
            "simulate" => Some(Block::Simulate),
            "graph" => Some(Block::Graph),
            _ => None,
        }
    }
}

/// What may follow `typed`, the text of a body line of `block` before the
/// word at the cursor.
pub fn body_next_words(block: Block, typed: &str) -> Next {
    let typed = typed.split('#').next().unwrap_or("").trim_start();
    match block {
        Block::Model | Block::Joint => model_line(typed),
        Block::Table => table_line(typed),
        Block::Simulate => mechanism_line(typed),
        Block::Graph => graph_line(typed),
    }
}

fn words_of(typed: &str) -> Vec<&str> {
    tokens(typed).into_iter().map(|(_, w)| w).collect()
}

fn next(words: &[&'static str], calls: &[&'static str], values: bool) -> Next {
    Next { words: words.to_vec(), calls: calls.to_vec(), values, names: Vec::new() }
}

/// A `model` (or `joint`) body line: family, prior, centre or outcome line.
fn model_line(typed: &str) -> Next {
    let words = words_of(typed);
    match words.as_slice() {
        [] => next(LINE_WORDS, &[], true),
        [FAMILY_LINE] => next(FAMILY_WORDS, &[], false),
        [FAMILY_LINE, BINOMIAL] => next(&OUT_OF[..1], &[], false),
        [FAMILY_LINE, BINOMIAL, out] if *out == OUT_OF[0] => next(&OUT_OF[1..], &[], false),
        [FAMILY_LINE, BINOMIAL, out, of] if [*out, *of] == OUT_OF => next(&[], &[], true),
        [FAMILY_LINE, form, rest @ ..] if TimeForm::from_word(form).is_some() => time_family_next(rest),
        [PRIOR_LINE] => {
            let mut words = PriorGroup::words();
            words.extend([POOLED_CORRELATIONS, PRIOR_FOR]);
            next(&words, &[], false)
        }
        [PRIOR_LINE, PRIOR_FOR, .., ":"] => next(&[], PRIOR_DISTRIBUTIONS, false),
        [PRIOR_LINE, PRIOR_FOR, ..] => {
            Next { words: Vec::new(), calls: Vec::new(), values: true, names: vec![Wanted { names: Names::Parameter, of: Vec::new() }] }
        }
        [PRIOR_LINE, pooled, correlations, ":"] if format!("{pooled} {correlations}") == POOLED_CORRELATIONS => {
            next(&[], &[LKJ], false)
        }
        [PRIOR_LINE, .., ":"] => next(&[], PRIOR_DISTRIBUTIONS, false),
        [CENTRE_LINE] => next(CENTRINGS, &[], false),
        [PARAMETERISE_LINE] => next(&[], &[], true),
        [PARAMETERISE_LINE, _] => next(&GroupLayout::WORDS, &[], false),
        [first, ..] if LINE_WORDS.contains(first) => Next::default(),
        _ => outcome_line(typed, &words),
    }
}

/// `Y from TERM, TERM per C, powers(X, D), spline(X, K, knots …) using T`.
fn outcome_line(typed: &str, words: &[&str]) -> Next {
    if let Some((call, commas, _)) = open_call(typed) {
        return match (call, commas) {
            (_, 0) => next(&[], &[], true),
            (SPLINE, 2) if !words.contains(&KNOTS) => next(&[KNOTS], &[], false),
            _ => Next::default(),
        };
    }
    let last = words[words.len() - 1];
    let before_last = words.len().checked_sub(2).map(|i| words[i]);
    if words.contains(&USING) && last != USING {
        return Next::default();
    }
    if words.len() == 1 {
        return next(&[FROM, USING], &[], false);
    }
    if last == FROM || typed.trim_end().ends_with(',') {
        return next(&[POOLED], TERM_CALLS, true);
    }
    if last == PER || last == USING || last == POOLED || last == POOLED_WITH || last == POOLED_WITHIN {
        return next(&[], &[], true);
    }
    if !words.contains(&FROM) {
        return Next::default();
    }
    if before_last == Some(POOLED) {
        return next(&[POOLED_WITH, POOLED_WITHIN, USING], &[], false);
    }
    if before_last == Some(POOLED_WITHIN) {
        return next(&[POOLED_WITH, USING], &[], false);
    }
    if before_last == Some(PER) || before_last == Some(POOLED_WITH) || last.ends_with(')') {
        return next(&[USING], &[], false);
    }
    next(&[PER, USING], &[], false)
}

/// The innermost bracket left open in `typed`: the call word before it,
/// the commas written inside it so far and whether nothing else is.
fn open_call(typed: &str) -> Option<(&str, usize, bool)> {
    let mut open: Vec<(usize, usize)> = Vec::new();
    for (i, c) in typed.char_indices() {
        match c {
            '(' | '[' => open.push((i, 0)),
            ')' | ']' => {
                open.pop();
            }
            ',' => {
                if let Some(last) = open.last_mut() {
                    last.1 += 1;
                }
            }
            _ => {}
        }
    }
    let &(at, commas) = open.last()?;
    let before = typed[..at].trim_end();
    let word_start = before.rfind(|c: char| !(c.is_alphanumeric() || c == '_')).map_or(0, |i| i + 1);
    Some((&before[word_start..], commas, typed[at + 1..].trim().is_empty()))
}

/// A `table` body line: a column declaration, `drop missing`, `keep where …`
/// or `stay on disk [across machines at HOST:PORT]`.
fn table_line(typed: &str) -> Next {
    let words = words_of(typed);
    match words.as_slice() {
        [] => next(&[DROP, KEEP, STAY], &[], true),
        [DROP] => next(&[MISSING], &[], false),
        [STAY] => next(&[ON], &[], false),
        [STAY, ON] => next(&[DISK], &[], false),
        [STAY, ON, DISK] => next(&[ACROSS], &[], false),
        [STAY, ON, DISK, ACROSS] => next(&[MACHINES], &[], false),
        [STAY, ON, DISK, ACROSS, MACHINES] => next(&[AT], &[], false),
        [KEEP] => next(&[WHERE], &[], false),
        [KEEP, WHERE, condition @ ..] => condition_next(condition),
        [_, ":"] => {
            let kinds: Vec<&'static str> = KINDS.iter().map(|(w, _)| *w).collect();
            next(&kinds, &[CATEGORY], false)
        }
        [_, ":", ..] if open_call(typed).is_some() => next(&[], &[], true),
        [_, ":", _] => next(&[IN], &[], false),
        [_, ":", kind, ..] if kind.starts_with(CATEGORY) && words.last().is_some_and(|w| w.ends_with(')')) && !words.contains(&IN) => {
            next(&[IN], &[], false)
        }
        _ => Next::default(),
    }
}

/// The next place of a `keep where` condition: a column (or `not`), an
/// operator, a value, then `and` / `or`.
fn condition_next(words: &[&str]) -> Next {
    let is_operator = |w: &str| !w.is_empty() && w.chars().all(|c| "<>=!".contains(c));
    let is_joint = |w: &str| [AND, OR, NOT].contains(&w) || w.ends_with('(');
    match words.last() {
        None => next(&[NOT], &[], true),
        Some(w) if is_joint(w) => next(&[NOT], &[], true),
        Some(w) if is_operator(w) => next(&[], &[], true),
        Some(_) if words.len() >= 2 && is_operator(words[words.len() - 2]) => next(&[AND, OR], &[], false),
        // a column: its comparison
        Some(_) => next(&Comparison::ALL.map(Comparison::symbol), &[], false),
    }
}

/// A `graph` body line: `[hidden] a -> b, c -> d`, node names joined by
/// arrows, several nodes at one step separated by commas.
fn graph_line(typed: &str) -> Next {
    let words = words_of(typed);
    let after_name = words.last().is_some_and(|w| *w != HIDDEN && *w != ARROW) && !typed.trim_end().ends_with(',');
    match words.as_slice() {
        [] => next(&[HIDDEN], &[], true),
        _ if after_name => next(&[ARROW, ","], &[], false),
        _ => next(&[], &[], true),
    }
}

/// A `simulate` body line: `node = distribution(…)`.
fn mechanism_line(typed: &str) -> Next {
    let words = words_of(typed);
    if let Some((call, _, empty)) = open_call(typed) {
        return match call {
            BERNOULLI if empty => next(&[LOGIT], FUNCTIONS, true),
            POISSON if empty => next(&[LOG], FUNCTIONS, true),
            // the levels of a category mechanism are names the line gives
            SHARES => next(&[], &[], true),
            _ => next(&[], FUNCTIONS, true),
        };
    }
    match words.as_slice() {
        [] => next(&[], &[], true),
        [_] => next(&["="], &[], false),
        [_, "="] => next(&[], DISTRIBUTIONS, false),
        [_, "=", dist, ..] if [EXPONENTIAL, WEIBULL].iter().any(|t| dist.starts_with(&format!("{t}("))) => follow_up_next(typed, &words),
        _ => Next::default(),
    }
}

/// The next word of a phrase `phrase` of which `typed` is the start
/// (a value once the phrase is whole); `None` when `typed` does not start it.
fn phrase_next(phrase: &[&'static str], typed: &[&str]) -> Option<Next> {
    if typed.len() > phrase.len() || typed.iter().zip(phrase).any(|(a, b)| a != b) {
        return None;
    }
    Some(match phrase.get(typed.len()) {
        Some(word) => next(&[*word], &[], false),
        None => next(&[], &[], true),
    })
}

/// After `family exponential|weibull`: `cut short by C` and `came by U`,
/// each once, in either order.
fn time_family_next(mut rest: &[&str]) -> Next {
    let (mut cut, mut came) = (false, false);
    loop {
        match rest {
            [c, s, b, _, tail @ ..] if [*c, *s, *b] == CUT_SHORT_BY => (cut, rest) = (true, tail),
            [c, b, _, tail @ ..] if [*c, *b] == CAME_BY => (came, rest) = (true, tail),
            _ => break,
        }
    }
    if rest.is_empty() {
        let offered: Vec<&'static str> = [(!cut).then_some(CUT_SHORT_BY[0]), (!came).then_some(CAME_BY[0])].into_iter().flatten().collect();
        return next(&offered, &[], false);
    }
    let phrases: [&[&'static str]; 2] = [&CUT_SHORT_BY, &CAME_BY];
    phrases.iter().find_map(|p| phrase_next(p, rest)).unwrap_or_default()
}

/// After a time mechanism's closing bracket: `followed until END cut short
/// by COLUMN [looked at every GAP came by UPPER]`, END a value or
/// `uniform(LO, HI)`.
fn follow_up_next(typed: &str, words: &[&str]) -> Next {
    let [followed, until] = FOLLOWED_UNTIL;
    let Some(at) = words.iter().position(|w| *w == followed) else {
        return if typed.trim_end().ends_with(')') { next(&[followed], &[], false) } else { Next::default() };
    };
    let rule = &words[at + 1..];
    if let Some(c) = rule.windows(3).position(|w| w == CUT_SHORT_BY).filter(|c| rule.len() > c + 3) {
        return looks_next(&rule[c + 4..]);
    }
    match rule {
        [] => next(&[until], &[], false),
        [w] if *w == until => next(&[], &[UNIFORM], true),
        [_, .., c, s, b] if [*c, *s, *b] == CUT_SHORT_BY => next(&[], &[], true),
        [_, .., c, s] if [*c, *s] == CUT_SHORT_BY[..2] => next(&[CUT_SHORT_BY[2]], &[], false),
        [_, .., c] if *c == CUT_SHORT_BY[0] => next(&[CUT_SHORT_BY[1]], &[], false),
        _ => next(&[CUT_SHORT_BY[0]], &[], false),
    }
}

/// After the cut-short column of a follow-up rule: `looked at every GAP
/// came by UPPER`.
fn looks_next(rest: &[&str]) -> Next {
    let every = LOOKED_AT_EVERY.len();
    match rest {
        [] => next(&[LOOKED_AT_EVERY[0]], &[], false),
        _ if rest.len() <= every => phrase_next(&LOOKED_AT_EVERY, rest).unwrap_or_default(),
        [.., _gap] if rest.len() == every + 1 => next(&[CAME_BY[0]], &[], false),
        _ => phrase_next(&CAME_BY, &rest[every + 1..]).unwrap_or_default(),
    }
}
