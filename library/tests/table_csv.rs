//! Reading CSV into typed tables: quoting and line ends as RFC 4180 defines
//! them, the byte-order mark, kind inference, level order, and the error
//! sentence for every malformed input.
//!
//! Error texts are `expect_test` snapshots: the snapshot is the reviewed
//! wording, so a change of wording shows up as a diff to review.

use std::path::PathBuf;

use expect_test::expect;
use waypath::table::{
    load_table, parse_table_line, ColumnData, ColumnKind, LoadReport, Table, TableError, TableSpec,
};

/// Loads `csv` as `orchard.csv` under the given table-cell body lines.
fn load(csv: &str, lines: &[&str]) -> Result<(Table, LoadReport), TableError> {
    load_bytes(csv.as_bytes(), lines)
}

fn load_bytes(csv: &[u8], lines: &[&str]) -> Result<(Table, LoadReport), TableError> {
    let rules = lines.iter().map(|line| parse_table_line(line).expect("test lines are valid"));
    let spec = TableSpec::with_rules("trees", "orchard.csv", rules)?;
    Table::from_csv_reader(&spec, "orchard.csv", csv)
}

fn error_text(csv: &str, lines: &[&str]) -> String {
    match load(csv, lines) {
        Ok(_) => panic!("expected an error for {csv:?}"),
        Err(error) => error.to_string(),
    }
}

fn fixture(name: &str) -> PathBuf {
    // cargo sets the variable when it runs the test; a binary reused from a
    // clone elsewhere keeps its build path in `env!`
    let manifest = std::env::var_os("CARGO_MANIFEST_DIR").map(PathBuf::from);
    manifest.unwrap_or_else(|| PathBuf::from(env!("CARGO_MANIFEST_DIR"))).join("tests/data/table").join(name)
}

fn reals(table: &Table, column: &str) -> Vec<f64> {
    table.column(column).and_then(|c| c.data.as_reals()).expect("numeric column")
}

fn labels(table: &Table, column: &str) -> Vec<String> {
    match &table.column(column).expect("column exists").data {
        ColumnData::Category { codes, levels } => {
            codes.iter().map(|&c| levels[c as usize].clone()).collect()
        }
        other => panic!("{column} is not a category: {other:?}"),
    }
}

// ---------------------------------------------------------------- RFC 4180

#[test]
fn rfc4180_quoted_fields_hold_commas_doubled_quotes_and_line_breaks() {
    // RFC 4180 §2 rules 5–7: a field in double quotes may hold commas and
    // CRLF line breaks, and a double quote inside it is written twice.
    let csv = "site,note,girth\r\n\"north, upper\",\"said \"\"ok\"\"\",21.5\r\nsouth,\"two\r\nlines\",30\r\n";
    let (table, _) = load(csv, &[]).unwrap();
    assert_eq!(labels(&table, "site"), ["north, upper", "south"]);
    assert_eq!(labels(&table, "note"), ["said \"ok\"", "two\r\nlines"]);
    assert_eq!(reals(&table, "girth"), [21.5, 30.0]);
}

#[test]
fn rfc4180_last_record_may_lack_a_line_break() {
    // RFC 4180 §2 rule 2: the last record may or may not end with a line break.
    let with = load("girth\r\n21.5\r\n30\r\n", &[]).unwrap().0;
    let without = load("girth\r\n21.5\r\n30", &[]).unwrap().0;
    assert_eq!(with, without);
    assert_eq!(with.nrows(), 2);
}

#[test]
fn crlf_and_lf_line_ends_give_the_same_table() {
    // RFC 4180 §2 rule 1 ends records with CRLF; files saved on Unix end them
    // with LF alone, and both must read the same.
    let lf = "rootstock,girth\ndwarf,22.4\nstandard,31.2\n";
    let crlf = lf.replace('\n', "\r\n");
    assert_eq!(load(lf, &[]).unwrap(), load(&crlf, &[]).unwrap());
}

#[test]
fn fixture_with_crlf_quotes_and_byte_order_mark_reads_like_the_plain_one() {
    // The UTF-8 byte-order mark EF BB BF (Unicode Standard §23.8, recalled)
    // must not become part of the first column name.
    let mut spec = TableSpec::new("trees", fixture("orchard_bom.csv"));
    spec.drop_missing = true;
    let (with_bom, _) = load_table(&spec).unwrap();
    spec.path = fixture("orchard.csv");
    let (plain, report) = load_table(&spec).unwrap();
    assert_eq!(with_bom, plain);
    assert_eq!(plain.column_names(), ["rootstock", "girth", "yield", "visits", "irrigated", "note"]);
    // Counted by eye in the fixture: 8 data rows, girth NA in row 6, yield empty in row 8.
    assert_eq!((report.rows_read, report.dropped_missing, plain.nrows()), (8, 2, 6));
    assert_eq!(labels(&plain, "note")[0], "north row, by the gate");
    assert_eq!(labels(&plain, "note")[3], "bark \"scarred\" on the west side");
}

#[test]
fn a_missing_file_is_named_in_the_error() {
    let spec = TableSpec::new("trees", "no_such_orchard.csv");
    let error = load_table(&spec).unwrap_err();
    expect![[r#"could not read no_such_orchard.csv: there is no such file (check the file name, and that the path is relative to the notebook)"#]]
        .assert_eq(&error.to_string());
}

// ------------------------------------------------------- kinds and levels

#[test]
fn undeclared_columns_are_inferred_and_reported() {
    let csv = "girth,visits,irrigated,rootstock,flag\n21.5,3,yes,dwarf,0\n-2,0,No,standard,1\n30,12,TRUE,dwarf,1\n";
    let (table, report) = load(csv, &["visits: real"]).unwrap();
    let kinds: Vec<ColumnKind> = table.columns.iter().map(|c| c.data.kind()).collect();
    assert_eq!(
        kinds,
        [ColumnKind::Real, ColumnKind::Real, ColumnKind::Binary, ColumnKind::Category, ColumnKind::Binary]
    );
    let inferred: Vec<&str> = report.inferred().map(|c| c.name.as_str()).collect();
    assert_eq!(inferred, ["girth", "irrigated", "rootstock", "flag"]);
    assert_eq!(table.column("irrigated").unwrap().data, ColumnData::Binary(vec![true, false, true]));
}

#[test]
fn whole_non_negative_numbers_are_inferred_as_counts() {
    let (table, _) = load("visits\n3\n0\n12\n", &[]).unwrap();
    assert_eq!(table.column("visits").unwrap().data, ColumnData::Count(vec![3, 0, 12]));
}

#[test]
fn declared_levels_keep_the_declared_order() {
    let csv = "rootstock\nstandard\ndwarf\nstandard\nsemi\n";
    let (table, _) = load(csv, &["rootstock: category(dwarf, semi, standard)"]).unwrap();
    let column = &table.column("rootstock").unwrap().data;
    assert_eq!(column.levels().unwrap(), ["dwarf", "semi", "standard"]);
    assert_eq!(labels(&table, "rootstock"), ["standard", "dwarf", "standard", "semi"]);
}

#[test]
fn undeclared_levels_follow_first_appearance() {
    let (table, _) = load("site\nriver\nhill\nriver\nmeadow\n", &["site: category"]).unwrap();
    assert_eq!(table.column("site").unwrap().data.levels().unwrap(), ["river", "hill", "meadow"]);
}

#[test]
fn declared_units_travel_with_the_column() {
    let (table, _) = load("girth,yield\n21.5,9\n", &["girth: real in cm", "yield: real in kg/tree"]).unwrap();
    assert_eq!(table.column("girth").unwrap().unit.as_deref(), Some("cm"));
    assert_eq!(table.column("yield").unwrap().describe_kind(), "real in kg/tree");
}

#[test]
fn fields_are_trimmed_and_non_ascii_labels_survive() {
    let (table, _) = load("site , girth\n  Église ,  21.5 \n", &[]).unwrap();
    assert_eq!(labels(&table, "site"), ["Église"]);
    assert_eq!(reals(&table, "girth"), [21.5]);
}

#[test]
fn whole_decimals_read_as_counts_when_declared() {
    let (table, _) = load("visits\n3.0\n4\n", &["visits: count"]).unwrap();
    assert_eq!(table.column("visits").unwrap().data, ColumnData::Count(vec![3, 4]));
}

// ------------------------------------------------------------ file shape

#[test]
fn empty_file_is_an_error() {
    expect![[r#"orchard.csv is empty (it needs a header row naming the columns, then one row per record)"#]]
        .assert_eq(&error_text("", &[]));
    expect![[r#"orchard.csv is empty (it needs a header row naming the columns, then one row per record)"#]]
        .assert_eq(&error_text("\r\n\r\n", &[]));
}

#[test]
fn header_without_rows_is_an_error() {
    expect![[r#"orchard.csv has a header row but no data rows (add rows under the header, or check that the cell names the right file)"#]]
        .assert_eq(&error_text("rootstock,girth\r\n", &[]));
}

#[test]
fn duplicate_column_names_are_an_error() {
    expect![[r#"orchard.csv row 1: the column name "girth" appears twice, as columns 2 and 4 (rename one so each column can be told apart)"#]]
        .assert_eq(&error_text("rootstock,girth,yield,girth\ndwarf,1,2,3\n", &[]));
}

#[test]
fn unnamed_column_is_an_error() {
    expect![[r#"orchard.csv row 1, column 3: the header cell is empty (give every column a name, or delete the empty column)"#]]
        .assert_eq(&error_text("rootstock,girth,\ndwarf,1,2\n", &[]));
}

#[test]
fn ragged_rows_are_errors_with_spreadsheet_row_numbers() {
    // Header is row 1, so the third data record is row 4.
    expect![[r#"orchard.csv row 4 has 3 fields but the header names 2 columns (look for an unquoted comma: a value that contains a comma must be written in double quotes)"#]]
        .assert_eq(&error_text("site,girth\nriver,1\nhill,2\nnorth, upper,3\n", &[]));
    expect!["orchard.csv row 3 has 1 field but the header names 2 columns (add the missing fields, leaving a field empty where the value is unknown)"]
        .assert_eq(&error_text("site,girth\nriver,1\nhill\n", &[]));
}

#[test]
fn a_quoted_line_break_stays_within_one_row() {
    // A spreadsheet shows a quoted line break inside one cell (RFC 4180 §2
    // rule 6), so the record after it is still the next row: row 3 here.
    expect![[r#"orchard.csv row 3, column girth: "thick" is not a number (fix the row, or write a missing value as NA or an empty field and add "drop missing")"#]]
        .assert_eq(&error_text("note,girth\n\"two\nlines\",1\nplain,thick\n", &["girth: real"]));
}

#[test]
fn text_that_is_not_utf8_is_an_error() {
    let bytes = b"site,girth\nriver,1\nh\xe9ll,2\n"; // Latin-1 é
    let error = load_bytes(bytes, &[]).unwrap_err();
    expect![[r#"orchard.csv row 3 is not valid UTF-8 text (save the file with UTF-8 encoding and load it again)"#]]
        .assert_eq(&error.to_string());
}

// ----------------------------------------------------------- bad values

#[test]
fn text_in_a_real_column_names_row_column_and_value() {
    let csv = "rootstock,girth\n".to_string() + &"dwarf,20\n".repeat(12) + "dwarf,n/a\n";
    expect![[r#"orchard.csv row 14, column girth: "n/a" is not a number (fix the row, or write a missing value as NA or an empty field and add "drop missing")"#]]
        .assert_eq(&error_text(&csv, &["girth: real in cm"]));
}

#[test]
fn text_in_an_inferred_numeric_column_suggests_declaring_a_category() {
    expect![[r#"orchard.csv row 4, column girth: "n/a" is not a number (most values of girth are numbers, so it was read as real; fix the row, write a missing value as NA and add "drop missing", or declare girth: category)"#]]
        .assert_eq(&error_text("girth\n20.5\n21\nn/a\n", &[]));
}

#[test]
fn decimal_comma_is_pointed_out() {
    expect![[r#"orchard.csv row 2, column girth: "20,5" is not a number (write the decimal mark as a point, e.g. 3.5)"#]]
        .assert_eq(&error_text("girth\n\"20,5\"\n", &["girth: real"]));
}

#[test]
fn non_finite_numbers_are_errors() {
    // Rust's f64 parser (like IEEE 754 text forms) accepts inf and NaN; a
    // measurement never is one.
    expect![[r#"orchard.csv row 3, column girth: "inf" is not a finite number (replace it with a measured value, or with NA and add "drop missing")"#]]
        .assert_eq(&error_text("girth\n20\ninf\n", &["girth: real"]));
    expect![[r#"orchard.csv row 2, column girth: "NaN" is not a finite number (replace it with a measured value, or with NA and add "drop missing")"#]]
        .assert_eq(&error_text("girth\nNaN\n20\n", &[]));
}

#[test]
fn counts_must_be_whole_and_not_negative() {
    expect![[r#"orchard.csv row 3, column visits: "-1" is negative, and a count cannot be (fix the row, or declare the column real if negative values are possible)"#]]
        .assert_eq(&error_text("visits\n2\n-1\n", &["visits: count"]));
    expect![[r#"orchard.csv row 2, column visits: "2.5" is not a whole number (fix the row, or declare the column real if fractional values are possible)"#]]
        .assert_eq(&error_text("visits\n2.5\n", &["visits: count"]));
    expect![[r#"orchard.csv row 2, column visits: "many" is not a count, a whole number 0 or more (fix the row, or write a missing value as NA or an empty field and add "drop missing")"#]]
        .assert_eq(&error_text("visits\nmany\n", &["visits: count"]));
}

#[test]
fn binary_values_are_checked() {
    expect![[r#"orchard.csv row 3, column irrigated: "sometimes" is not a binary value (write 0/1, yes/no or true/false, or declare the column a category)"#]]
        .assert_eq(&error_text("irrigated\nyes\nsometimes\n", &["irrigated: binary"]));
}

#[test]
fn a_value_outside_the_declared_levels_lists_them() {
    expect![[r#"orchard.csv row 3, column rootstock: "Dwarf" is not one of the declared levels dwarf and standard (fix the row, perhaps to "dwarf", or add the level to the declaration)"#]]
        .assert_eq(&error_text("rootstock\nstandard\nDwarf\n", &["rootstock: category(dwarf, standard)"]));
    expect![[r#"orchard.csv row 2, column rootstock: "seedling" is not one of the declared levels dwarf, semi and standard (fix the row, or add the level to the declaration)"#]]
        .assert_eq(&error_text("rootstock\nseedling\n", &["rootstock: category(dwarf, semi, standard)"]));
}

#[test]
fn the_earliest_bad_row_is_reported_whatever_its_column() {
    // girth (column 1) goes wrong in row 4, yield (column 2) already in row 3.
    expect![[r#"orchard.csv row 3, column yield: "lots" is not a number (fix the row, or write a missing value as NA or an empty field and add "drop missing")"#]]
        .assert_eq(&error_text("girth,yield\n1,2\n1,lots\nthick,2\n", &["girth: real", "yield: real"]));
}

#[test]
fn a_declared_column_absent_from_the_file_is_an_error() {
    expect![[r#"orchard.csv has no column "girht", which the table cell declares (perhaps "girth"; the file's columns are rootstock, girth and yield)"#]]
        .assert_eq(&error_text("rootstock,girth,yield\ndwarf,1,2\n", &["girht: real"]));
}

// --------------------------------------------------------- missing values

#[test]
fn missing_values_are_an_error_by_default() {
    let csv = "girth,yield\n1,2\n,2\nNA,3\n4,\n5,6\n";
    expect![[r#"orchard.csv, column girth: 2 values are missing (rows 3 and 4), and other columns have missing values too (yield 1); add "drop missing" to the table cell to leave those rows out, or fill the values in"#]]
        .assert_eq(&error_text(csv, &[]));
}

#[test]
fn missing_value_error_lists_the_first_five_rows() {
    let csv = "girth\n".to_string() + &"NA\n".repeat(8) + "3\n";
    expect![[r#"orchard.csv, column girth: 8 values are missing (rows 2, 3, 4, 5, 6 and 3 more); add "drop missing" to the table cell to leave those rows out, or fill the values in"#]]
        .assert_eq(&error_text(&csv, &[]));
    expect![[r#"orchard.csv, column girth: 1 value is missing (row 2); add "drop missing" to the table cell to leave those rows out, or fill the values in"#]]
        .assert_eq(&error_text("girth\nNA\n3\n", &[]));
}

#[test]
fn drop_missing_counts_rows_and_columns_independently() {
    // Rows built so that the expected counts follow from the construction:
    // row i has girth missing when i % 4 == 0 and yield missing when i % 6 == 0.
    let n = 60;
    let mut csv = String::from("girth,yield,site\n");
    for i in 0..n {
        let girth = if i % 4 == 0 { "NA".to_string() } else { format!("{}.5", 20 + i % 7) };
        let yield_ = if i % 6 == 0 { String::new() } else { format!("{}", 9 + i % 5) };
        csv += &format!("{girth},{yield_},{}\n", ["river", "hill"][i % 2]);
    }
    let (table, report) = load(&csv, &["drop missing"]).unwrap();
    let girth_missing = (0..n).filter(|i| i % 4 == 0).count();
    let yield_missing = (0..n).filter(|i| i % 6 == 0).count();
    let either = (0..n).filter(|i| i % 4 == 0 || i % 6 == 0).count();
    let missing: Vec<usize> = report.columns.iter().map(|c| c.missing).collect();
    assert_eq!(missing, [girth_missing, yield_missing, 0]);
    assert_eq!(report.dropped_missing, either);
    assert_eq!(table.nrows(), n - either);
    assert_eq!(report.rows_kept(), n - either);
    let expected_girth: Vec<f64> = (0..n)
        .filter(|i| i % 4 != 0 && i % 6 != 0)
        .map(|i| (20 + i % 7) as f64 + 0.5)
        .collect();
    assert_eq!(reals(&table, "girth"), expected_girth);
}

#[test]
fn dropping_every_row_is_an_error() {
    expect![[r#"orchard.csv: no rows are left after "drop missing" (loosen the condition, or check the data)"#]]
        .assert_eq(&error_text("girth,yield\nNA,1\n2,\n", &["drop missing"]));
}

// --------------------------------------------------------------- speed

#[test]
#[ignore = "timing check; run with --ignored in release"]
fn a_million_numeric_rows_load_in_well_under_two_seconds() {
    use rand::{rngs::StdRng, RngExt, SeedableRng};
    let mut rng = StdRng::seed_from_u64(2024);
    let mut csv = String::from("girth,yield,visits\n");
    for _ in 0..1_000_000 {
        let girth: f64 = rng.random_range(10.0..40.0);
        let yield_: f64 = rng.random_range(0.0..25.0);
        let visits: u32 = rng.random_range(0..9);
        csv += &format!("{girth:.3},{yield_:.3},{visits}\n");
    }
    let start = std::time::Instant::now();
    let (table, _) = load(&csv, &["girth: real in cm", "drop missing", "keep where girth > 20"]).unwrap();
    let elapsed = start.elapsed();
    eprintln!("loaded {} of 1000000 rows in {elapsed:?}", table.nrows());
    assert!(elapsed.as_secs_f64() < 2.0, "took {elapsed:?}");
}

#[test]
fn errors_serialise_with_their_place() {
    let error = load("girth\n20\nthick\n", &["girth: real"]).unwrap_err();
    let value = serde_json::to_value(&error).unwrap();
    assert_eq!(value["error"], "bad_value");
    assert_eq!((value["row"].as_u64(), value["column"].as_str()), (Some(3), Some("girth")));
    assert_eq!(error.row(), Some(3));
}
