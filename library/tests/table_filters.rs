//! `keep where` filters and the load summary, checked against counts the
//! test computes itself from the generated rows (never from the loader), and
//! the error sentence for each kind of bad condition (snapshots of the
//! reviewed wording).

use expect_test::expect;
use rand::{rngs::StdRng, RngExt, SeedableRng};
use serde_json::json;
use waypath::table::{parse_table_line, summary_json, LoadReport, Table, TableError, TableSpec};

/// One generated tree, with numbers as the CSV writes them (two decimals)
/// and read back by the standard library parser.
struct Tree {
    rootstock: &'static str,
    girth: Option<f64>,
    yield_: f64,
    visits: u64,
    irrigated: bool,
}

/// An invented orchard survey, seed fixed; about 1 girth in 12 is missing.
fn orchard(rows: usize, seed: u64) -> (String, Vec<Tree>) {
    let mut rng = StdRng::seed_from_u64(seed);
    let mut csv = String::from("rootstock,girth,yield,visits,irrigated\n");
    let mut trees = Vec::with_capacity(rows);
    for _ in 0..rows {
        let rootstock = if rng.random_bool(0.45) { "dwarf" } else { "standard" };
        let girth_text = format!("{:.2}", rng.random_range(12.0..40.0));
        let girth_text = if rng.random_bool(1.0 / 12.0) { "NA".to_string() } else { girth_text };
        let yield_text = format!("{:.2}", rng.random_range(2.0..22.0));
        let visits: u64 = rng.random_range(0..7);
        let irrigated = rng.random_bool(0.6);
        csv += &format!(
            "{rootstock},{girth_text},{yield_text},{visits},{}\n",
            if irrigated { "yes" } else { "no" }
        );
        trees.push(Tree {
            rootstock,
            girth: girth_text.parse().ok(),
            yield_: yield_text.parse().expect("formatted number"),
            visits,
            irrigated,
        });
    }
    (csv, trees)
}

const DECLARATIONS: [&str; 3] =
    ["rootstock: category(dwarf, standard)", "girth: real in cm", "yield: real in kg"];

fn load(csv: &str, extra: &[&str]) -> Result<(Table, LoadReport), TableError> {
    let lines = DECLARATIONS.iter().chain(extra);
    let rules = lines.map(|line| parse_table_line(line).expect("test lines are valid"));
    let spec = TableSpec::with_rules("trees", "orchard.csv", rules)?;
    Table::from_csv_reader(&spec, "orchard.csv", csv.as_bytes())
}

fn error_text(csv: &str, extra: &[&str]) -> String {
    match load(csv, extra) {
        Ok(_) => panic!("expected an error for {extra:?}"),
        Err(error) => error.to_string(),
    }
}

fn girths(table: &Table) -> Vec<f64> {
    table.column("girth").and_then(|c| c.data.as_reals()).expect("girth is real")
}

/// Girths of the complete trees satisfying `keep`, in file order.
fn expected_girths(trees: &[Tree], keep: impl Fn(&Tree, f64) -> bool) -> Vec<f64> {
    trees
        .iter()
        .filter_map(|t| t.girth.map(|g| (t, g)))
        .filter(|(t, g)| keep(t, *g))
        .map(|(_, g)| g)
        .collect()
}

#[test]
fn and_of_a_number_and_a_level_keeps_the_independently_counted_rows() {
    let (csv, trees) = orchard(400, 7);
    let (table, report) =
        load(&csv, &["drop missing", "keep where girth > 25 and rootstock = dwarf"]).unwrap();
    let expected = expected_girths(&trees, |t, g| g > 25.0 && t.rootstock == "dwarf");
    let complete = trees.iter().filter(|t| t.girth.is_some()).count();
    // The data must exercise the filter: some rows missing, some kept, some dropped.
    assert!(complete < trees.len() && !expected.is_empty() && expected.len() < complete);
    assert_eq!(girths(&table), expected);
    assert_eq!(report.dropped_missing, trees.len() - complete);
    assert_eq!(report.filters[0].kept, expected.len());
    assert_eq!(report.filters[0].dropped, complete - expected.len());
}

#[test]
fn not_over_a_bracketed_or_keeps_the_independently_counted_rows() {
    let (csv, trees) = orchard(400, 8);
    let (table, _) =
        load(&csv, &["drop missing", "keep where not (visits <= 2 or irrigated = no)"]).unwrap();
    // De Morgan: not (a or b) = not a and not b.
    let expected = expected_girths(&trees, |t, _| t.visits > 2 && t.irrigated);
    assert_eq!(girths(&table), expected);
}

#[test]
fn and_binds_tighter_than_or() {
    let (csv, trees) = orchard(400, 9);
    let line = "keep where rootstock != standard or yield >= 12.5 and girth < 30";
    let (table, _) = load(&csv, &["drop missing", line]).unwrap();
    // Boolean precedence (recalled): a or (b and c).
    let expected =
        expected_girths(&trees, |t, g| t.rootstock != "standard" || (t.yield_ >= 12.5 && g < 30.0));
    assert_eq!(girths(&table), expected);
}

#[test]
fn filters_apply_in_order_and_report_each_step() {
    let (csv, trees) = orchard(300, 10);
    let lines = ["drop missing", "keep where girth >= 20", "keep where yield < 15 and visits != 0"];
    let (table, report) = load(&csv, &lines).unwrap();
    let complete = trees.iter().filter(|t| t.girth.is_some()).count();
    let after_first = expected_girths(&trees, |_, g| g >= 20.0).len();
    let after_second =
        expected_girths(&trees, |t, g| g >= 20.0 && t.yield_ < 15.0 && t.visits != 0).len();
    assert!(after_second < after_first && after_first < complete && 0 < after_second);
    let steps: Vec<(usize, usize, usize)> =
        report.filters.iter().map(|f| (f.rows_before, f.kept, f.dropped)).collect();
    assert_eq!(
        steps,
        [
            (complete, after_first, complete - after_first),
            (after_first, after_second, after_first - after_second)
        ]
    );
    assert_eq!(table.nrows(), after_second);
    assert_eq!(report.dropped(), trees.len() - after_second);
}

#[test]
fn summary_json_has_the_agreed_shape() {
    let (csv, trees) = orchard(120, 11);
    let (table, report) = load(&csv, &["drop missing", "keep where girth > 15"]).unwrap();
    let missing = trees.iter().filter(|t| t.girth.is_none()).count();
    let kept = expected_girths(&trees, |_, g| g > 15.0).len();
    let expected = json!({
        "name": "trees",
        "rows": kept,
        "columns": [
            {"name": "rootstock", "kind": "category", "levels": ["dwarf", "standard"], "missing": 0},
            {"name": "girth", "kind": "real", "levels": null, "missing": missing},
            {"name": "yield", "kind": "real", "levels": null, "missing": 0},
            {"name": "visits", "kind": "count", "levels": null, "missing": 0},
            {"name": "irrigated", "kind": "binary", "levels": null, "missing": 0},
        ],
        "dropped": trees.len() - kept,
        "filters": [{"condition": "girth > 15", "kept": kept, "dropped": trees.len() - missing - kept}],
    });
    assert_eq!(summary_json(&table, &report), expected);
}

#[test]
fn binary_columns_compare_with_words_or_digits() {
    let (csv, trees) = orchard(200, 12);
    let by_word = load(&csv, &["drop missing", "keep where irrigated = yes"]).unwrap().0;
    let by_digit = load(&csv, &["drop missing", "keep where irrigated != 0"]).unwrap().0;
    assert_eq!(by_word, by_digit);
    assert_eq!(girths(&by_word), expected_girths(&trees, |t, _| t.irrigated));
}

// ------------------------------------------------------------------ errors

#[test]
fn an_unknown_column_in_a_condition_lists_near_matches() {
    let (csv, _) = orchard(20, 1);
    expect![[r#"orchard.csv, keep where girht > 20: there is no column "girht" (perhaps "girth"; the columns are rootstock, girth, yield, visits and irrigated)"#]]
        .assert_eq(&error_text(&csv, &["drop missing", "keep where girht > 20"]));
}

#[test]
fn an_unknown_level_in_a_condition_lists_the_levels() {
    let (csv, _) = orchard(20, 1);
    expect![[r#"orchard.csv, keep where girth > 0 and rootstock = Dwarf: "Dwarf" is not a level of rootstock (perhaps "dwarf"; the levels are dwarf and standard)"#]]
        .assert_eq(&error_text(&csv, &["drop missing", "keep where girth > 0 and rootstock = Dwarf"]));
}

#[test]
fn comparisons_must_suit_the_column_kind() {
    let (csv, _) = orchard(20, 1);
    expect![[r#"orchard.csv, keep where rootstock > dwarf: rootstock is a category column, so compare it with = or != and one of its levels (dwarf or standard)"#]]
        .assert_eq(&error_text(&csv, &["drop missing", "keep where rootstock > dwarf"]));
    expect![[r#"orchard.csv, keep where girth > thick: girth is a real column, so compare it with a number, not "thick" (e.g. girth > 0)"#]]
        .assert_eq(&error_text(&csv, &["drop missing", "keep where girth > thick"]));
    expect![[r#"orchard.csv, keep where irrigated = 2: irrigated is a binary column, so compare it with yes or no (or 1 or 0), not "2""#]]
        .assert_eq(&error_text(&csv, &["drop missing", "keep where irrigated = 2"]));
}

#[test]
fn a_filter_that_keeps_nothing_is_an_error() {
    let (csv, _) = orchard(20, 1);
    expect![[r#"orchard.csv: no rows are left after "keep where girth > 1000" (loosen the condition, or check the data)"#]]
        .assert_eq(&error_text(&csv, &["drop missing", "keep where girth > 1000"]));
}

#[test]
fn malformed_conditions_say_what_to_write() {
    let problem = |line: &str| parse_table_line(line).unwrap_err().to_string();
    expect![[r#"table cell line "keep where girth == 3": write a single "=" to test equality"#]]
        .assert_eq(&problem("keep where girth == 3"));
    expect![[r#"table cell line "keep where (girth > 3 or yield < 2": the "(" before "girth > 3 or yield < 2" is not closed"#]]
        .assert_eq(&problem("keep where (girth > 3 or yield < 2"));
    expect![[r#"table cell line "keep where 3 < girth": a comparison starts with the column name, then the number (e.g. girth > 3)"#]]
        .assert_eq(&problem("keep where 3 < girth"));
    expect![[r#"table cell line "keep where girth > 3 rootstock = dwarf": unexpected "rootstock" after "girth > 3" (join comparisons with and / or)"#]]
        .assert_eq(&problem("keep where girth > 3 rootstock = dwarf"));
    expect![[r#"table cell line "keep where girth": expected a comparison (<, <=, >, >=, = or !=) after "girth""#]]
        .assert_eq(&problem("keep where girth"));
    expect![[r#"table cell line "keep where": "keep where" needs a condition, e.g. keep where girth > 0"#]]
        .assert_eq(&problem("keep where"));
    expect![[r#"table cell line "keep where girth > 3)": there is a ")" without a matching "(""#]]
        .assert_eq(&problem("keep where girth > 3)"));
}
