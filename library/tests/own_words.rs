//! Keep it so (issue 14): the words Waypath retired because a practitioner
//! would take them for another program's stay retired. The list lives in
//! `tests/retired-words.txt` (extend it there); this file checks the README
//! and every word and phrase the statement grammar offers, header and body.
//! `tests/python/test_notebooks.py` checks the demo notebooks' outputs
//! against the same list.

use std::collections::{HashSet, VecDeque};

use waypath::cells::statements::body_grammar::{body_next_words, Block};
use waypath::cells::statements::grammar::{next_words, Next, FORMS, LAPLACE_OPTIONS, METHODS, NUTS_OPTIONS, PLOT_KINDS};
use waypath::model::PriorGroup;

const LIST: &str = include_str!("../../tests/retired-words.txt");
const README: &str = include_str!("../../README.md");

/// The retired texts of the list, with what replaced each.
fn retired() -> Vec<(&'static str, &'static str)> {
    LIST.lines()
        .filter(|l| !l.trim().is_empty() && !l.starts_with('#'))
        .map(|l| l.split_once('\t').unwrap_or_else(|| panic!("no tab in the list line {l:?}")))
        .collect()
}

/// Whether `pattern` occurs in `text` at the start of a word (the character
/// before it is not a letter, a digit or `_`).
fn starts_a_word_in(pattern: &str, text: &str) -> bool {
    text.match_indices(pattern)
        .any(|(at, _)| !text[..at].chars().next_back().is_some_and(|c| c.is_alphanumeric() || c == '_'))
}

/// Every retired text found in `text`, as "`old` (now: …)" lines.
fn found_in(text: &str) -> Vec<String> {
    retired().into_iter().filter(|(old, _)| starts_a_word_in(old, text)).map(|(old, now)| format!("`{old}` (now: {now})")).collect()
}

/// What the grammar offers after `typed`, as the texts to append: fixed
/// words, calls with their bracket, and `x` where a value fits.
fn continuations(next: &Next) -> Vec<String> {
    let mut out: Vec<String> = next.words.iter().map(|w| w.to_string()).collect();
    out.extend(next.calls.iter().map(|c| format!("{c}(")));
    if next.values {
        out.push("x".into());
    }
    out
}

/// Breadth-first walk of what a grammar offers from each seed, up to `depth`
/// appended words and `cap` texts in all (option lists can be written in
/// any order, so the walk stops early rather than list every order; the
/// first words of every option are met long before). At most two values in
/// a row (`contrast m: x b vs a` needs two).
fn walk(seeds: &[String], offers: &dyn Fn(&str) -> Next, depth: usize, cap: usize) -> Vec<String> {
    let mut seen: HashSet<String> = seeds.iter().cloned().collect();
    let mut queue: VecDeque<(String, usize)> = seeds.iter().map(|s| (s.clone(), 0)).collect();
    let mut texts = Vec::new();
    while let Some((typed, steps)) = queue.pop_front() {
        texts.push(typed.clone());
        if steps == depth || seen.len() > cap {
            continue;
        }
        let mut words = continuations(&offers(&typed));
        // inside a call, the user also writes the commas and the closing
        // bracket, which the grammar never offers
        if typed.matches('(').count() > typed.matches(')').count() {
            words.extend([",".to_string(), ")".to_string()]);
        }
        for word in words {
            if word == "x" && typed.ends_with(" x x") {
                continue;
            }
            let glued = typed.is_empty() || typed.ends_with('(') || word == "," || word == ")";
            let longer = if glued { format!("{typed}{word}") } else { format!("{typed} {word}") };
            if seen.insert(longer.clone()) {
                queue.push_back((longer, steps + 1));
            }
        }
    }
    texts
}

/// Every header text the grammar offers (walked), every form's usage, and
/// the option and figure word lists.
fn header_texts() -> Vec<String> {
    let mut texts = walk(&[String::new()], &|typed| next_words(typed), 16, 200_000);
    texts.extend(FORMS.iter().map(|f| f.usage.to_string()));
    for list in [PLOT_KINDS, METHODS, LAPLACE_OPTIONS, NUTS_OPTIONS] {
        texts.extend(list.iter().map(|w| w.to_string()));
    }
    texts
}

/// Every body-line text the `model`, `joint`, `table`, `simulate` and `graph`
/// grammars offer, walked from an empty line and from each `prior GROUP :`
/// (the colon is written by the user, never offered).
fn body_texts() -> Vec<String> {
    let mut seeds = vec![String::new()];
    seeds.extend(PriorGroup::words().iter().map(|g| format!("prior {g} :")));
    let mut texts = Vec::new();
    for block in [Block::Model, Block::Joint, Block::Table, Block::Simulate, Block::Graph] {
        texts.extend(walk(&seeds, &|typed| body_next_words(block, typed), 10, 50_000));
    }
    texts
}

/// The matcher and the walks do reach what they must: a retired label is
/// found, a word that merely contains the letters is not, and the walks
/// arrive at phrases the README documents (`family binomial out of n`,
/// `prior slopes: student(…)`, `with nuts`, `spline(x, k, knots …)`).
#[test]
fn the_check_sees_what_it_should() {
    assert!(retired().len() >= 8, "the list lost entries: {:?}", retired());
    assert_eq!(found_in("yield from girth: b_girth[dwarf]"), ["`b_` (now: slope labels read as words: `girth slope`, `girth slope[dwarf]`, `day power 2`)"]);
    assert!(found_in("sub_total, draw_count, web_page").is_empty());
    let body = body_texts();
    for want in ["family binomial out of x", "prior slopes : student(", "x from spline(x,, knots", "x from powers(x)", "x from x per x using x"] {
        assert!(body.iter().any(|t| t == want), "the body walk never reached {want:?}");
    }
    let headers = header_texts();
    for want in ["fit x with nuts", "paths from x to x in x given x", "contrast x : x x vs x"] {
        assert!(headers.iter().any(|t| t.starts_with(want)), "the header walk never reached {want:?}");
    }
}

#[test]
fn the_readme_speaks_our_own_words() {
    let found = found_in(README);
    assert!(found.is_empty(), "README.md uses retired words: {found:?}");
}

#[test]
fn the_statement_grammar_offers_no_retired_word() {
    // each retired text with the shortest grammar text that offers it
    let mut found: Vec<(String, String)> = Vec::new();
    for text in header_texts().into_iter().chain(body_texts()) {
        for hit in found_in(&text) {
            if !found.iter().any(|(h, _)| *h == hit) {
                found.push((hit, text.clone()));
            }
        }
    }
    let lines: Vec<String> = found.iter().map(|(hit, text)| format!("{hit}, e.g. in {text:?}")).collect();
    assert!(lines.is_empty(), "the grammar offers retired words:\n{}", lines.join("\n"));
}

/// README "Output structures", the paragraph on parameter labels: every term
/// kind's label as documented, the same in the fit's JSON, the draws CSV
/// header and a `plot … of` list (typed with extra spaces).
#[test]
fn labels_read_as_the_readme_documents_them_everywhere() {
    use std::sync::atomic::AtomicBool;
    use waypath::cells::{RunControl, Session};
    let dir = std::env::temp_dir().join(format!("wp-own-words-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    // Invented rows: 40 trees, two rootstocks, three real predictors.
    let mut csv = String::from("rootstock,girth,age,light,yield\n");
    for i in 0..40 {
        let (r, g, a, l) = (if i % 2 == 0 { "dwarf" } else { "standard" }, 20.0 + (i * 7 % 13) as f64, 2.0 + (i % 9) as f64, (i * 5 % 17) as f64);
        csv.push_str(&format!("{r},{g},{a},{l},{}\n", 10.0 + 0.8 * g + 0.3 * a * a + (l * 0.4).sin() + (i % 3) as f64 * 0.5));
    }
    std::fs::write(dir.join("trees.csv"), csv).unwrap();
    let mut session = Session::new(&dir);
    let cancel = AtomicBool::new(false);
    let progress = |_: &str| {};
    let mut run = |cell: &str| {
        let out = session.run_cell(cell, &RunControl { cancel: &cancel, progress: &progress });
        assert!(out.error.is_none(), "{cell}: {}", out.error.map(|e| e.describe()).unwrap_or_default());
        out.displays
    };
    let fitted = run(
        "table trees from \"trees.csv\":\n    rootstock: category(dwarf, standard)\n\
         model m:\n    yield from rootstock, girth per rootstock, powers(age, 2), spline(light, 4) using trees\n\
         fit m with laplace seed 3\n",
    );
    let json = fitted.last().and_then(|d| d.json.clone()).expect("the fit's JSON");
    let names: Vec<&str> = json["estimates"].as_array().unwrap().iter().map(|p| p["parameter"].as_str().unwrap()).collect();
    let documented = [
        "rootstock[dwarf]", "rootstock[standard]", "girth slope[dwarf]", "girth slope[standard]", "age power 1", "age power 2",
        "light spline 2", "light spline 3", "light spline 4", "spread",
    ];
    assert_eq!(names, documented);
    run("export m draws to \"draws.csv\"\n");
    let header = std::fs::read_to_string(dir.join("draws.csv")).unwrap().lines().next().unwrap().to_string();
    assert_eq!(header, format!("chain,draw,{}", documented.join(",")));
    let plotted = run("plot m estimates of girth   slope[dwarf],  age power 2\n");
    let svg = plotted.iter().find_map(|d| d.svg.clone()).expect("a figure");
    assert!(svg.contains("girth slope[dwarf]") && svg.contains("age power 2"), "the figure names the parameters");
    assert!(found_in(&svg).is_empty() && found_in(&json.to_string()).is_empty());
}
