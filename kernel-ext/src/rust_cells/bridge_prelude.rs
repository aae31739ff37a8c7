//! The bridge between `%%rust` cells and the declarative session, as source
//! text that is both compiled into the kernel and injected into every Rust
//! cell context (lines starting with `//!` are left out when injecting).
//!
//! A table travels as two files in an exchange folder: `NAME.csv` (a header
//! row, then one row per observation; reals in shortest round-trip form,
//! binaries as 0/1, categories as their labels) and `NAME.columns`, one
//! declaration per column in the `table` cell's own syntax
//! (`rootstock: category(dwarf, standard)`, `girth: real in cm`). Reading
//! goes through the library's CSV loader with those declarations, so kinds,
//! level order and units come back exactly. A category whose levels came in
//! order of first appearance (not a stated, lowest-first order) is named in a
//! third file, `NAME.unordered`, one column per line, so it comes back
//! unordered too (a `steps(c)` term refuses it on both sides). Before a cell the kernel writes
//! the session's tables to `tables/`; a cell's `wp_publish` writes to
//! `published/`, which the kernel reads back after the cell. The draws of
//! each fitted model are in `draws/MODEL.csv` (columns `chain`, `draw`, then
//! one per parameter label), read with [`wp_draws`].

use std::path::{Path, PathBuf};

use waypath::table::{load_table, parse_table_line, ColumnData, Table, TableSpec};

/// The exchange folder shared with the kernel (environment variable
/// `WAYPATH_EXCHANGE`, set when the Rust context starts).
pub fn wp_exchange() -> PathBuf {
    PathBuf::from(std::env::var("WAYPATH_EXCHANGE").unwrap_or_default())
}

/// The session table `name`, as it was when the cell started.
pub fn wp_table(name: &str) -> Table {
    match wp_read_table(&wp_exchange().join("tables"), name) {
        Ok(table) => table,
        Err(message) => panic!("{message}"),
    }
}

/// The posterior draws of fitted model `model` as a table: columns `chain`,
/// `draw` and one per parameter label (e.g. `.column("slope[girth]")`).
pub fn wp_draws(model: &str) -> Table {
    let path = wp_exchange().join("draws").join(format!("{model}.csv"));
    let file = match std::fs::File::open(&path) {
        Ok(file) => file,
        Err(_) => panic!("model {model} has no draws in the session; run `fit {model}` in a cell above first"),
    };
    match Table::from_csv_reader(&TableSpec::new(model, &path), model, file) {
        Ok((table, _)) => table,
        Err(e) => panic!("draws of {model}: {e}"),
    }
}

/// Publish `table` under `name`; declarative cells after this one see it.
pub fn wp_publish(name: &str, table: &Table) {
    if let Err(message) = wp_write_table(&wp_exchange().join("published"), name, table) {
        panic!("{message}")
    }
}

/// Write `table` as `dir/NAME.csv` and `dir/NAME.columns`.
pub fn wp_write_table(dir: &Path, name: &str, table: &Table) -> Result<(), String> {
    wp_check_name(name)?;
    let fail = |e: std::io::Error| format!("cannot write table {name} to {}: {e}", dir.display());
    std::fs::create_dir_all(dir).map_err(fail)?;
    let mut csv = table.columns.iter().map(|c| wp_csv_field(&c.name)).collect::<Vec<_>>().join(",");
    csv.push('\n');
    for row in 0..table.nrows() {
        let fields: Vec<String> = table.columns.iter().map(|c| wp_field_at(&c.data, row)).collect();
        csv.push_str(&fields.join(","));
        csv.push('\n');
    }
    let declarations: String =
        table.columns.iter().map(|c| format!("{}: {}\n", c.name, c.describe_kind())).collect();
    let unordered: String = table
        .columns
        .iter()
        .filter(|c| matches!(c.data, ColumnData::Category { .. }) && !c.ordered)
        .map(|c| format!("{}\n", c.name))
        .collect();
    std::fs::write(dir.join(format!("{name}.csv")), csv).map_err(fail)?;
    std::fs::write(dir.join(format!("{name}.unordered")), unordered).map_err(fail)?;
    std::fs::write(dir.join(format!("{name}.columns")), declarations).map_err(fail)
}

/// Read `dir/NAME.csv` with the declarations of `dir/NAME.columns`.
pub fn wp_read_table(dir: &Path, name: &str) -> Result<Table, String> {
    wp_check_name(name)?;
    let csv = dir.join(format!("{name}.csv"));
    let declarations = std::fs::read_to_string(dir.join(format!("{name}.columns")))
        .map_err(|_| format!("there is no table named {name} in the session; make it in a cell above first"))?;
    let mut spec = TableSpec::new(name, csv);
    for line in declarations.lines().filter(|l| !l.trim().is_empty()) {
        let rule = parse_table_line(line).map_err(|e| format!("table {name}: {e}"))?;
        spec.add_rule(rule).map_err(|e| format!("table {name}: {e}"))?;
    }
    let mut table = load_table(&spec).map(|(table, _)| table).map_err(|e| format!("table {name}: {e}"))?;
    // Written by wp_write_table; a table written without it keeps the declared order.
    let unordered = std::fs::read_to_string(dir.join(format!("{name}.unordered"))).unwrap_or_default();
    for column in table.columns.iter_mut().filter(|c| unordered.lines().any(|l| l == c.name)) {
        column.ordered = false;
    }
    Ok(table)
}

/// Table names become file names: the session's own rule for names
/// (letters of any script, digits and `_`, not starting with a digit), so
/// every table a declarative cell can make crosses the bridge.
fn wp_check_name(name: &str) -> Result<(), String> {
    let mut chars = name.chars();
    let starts_well = chars.next().is_some_and(|c| c.is_alphabetic() || c == '_');
    if starts_well && chars.all(|c| c.is_alphanumeric() || c == '_') {
        Ok(())
    } else {
        Err(format!("{name:?} cannot name a table; use letters, digits and _ and start with a letter"))
    }
}

/// One value as a CSV field.
fn wp_field_at(data: &ColumnData, row: usize) -> String {
    match data {
        ColumnData::Real(v) => format!("{}", v[row]),
        ColumnData::Count(v) => v[row].to_string(),
        ColumnData::Binary(v) => if v[row] { "1" } else { "0" }.to_string(),
        ColumnData::Category { codes, levels } => wp_csv_field(&levels[codes[row] as usize]),
    }
}

/// Quote a field holding a comma, a quote or a line break (RFC 4180).
fn wp_csv_field(text: &str) -> String {
    if text.contains([',', '"', '\n', '\r']) {
        format!("\"{}\"", text.replace('"', "\"\""))
    } else {
        text.to_string()
    }
}
