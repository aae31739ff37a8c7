//! The body of a `table` cell, one line at a time, and the spec it builds.
//!
//! The cells module splits a cell into its header (`table trees from
//! "orchard.csv":`) and body lines, and strips comments; each body line is one
//! [`TableRule`]:
//!
//! ```text
//! rootstock: category(dwarf, standard)     level order as written
//! girth: real in cm                        optional unit after "in"
//! visits: count
//! irrigated: binary
//! drop missing
//! keep where girth > 0 and rootstock = dwarf
//! ```
//!
//! Parsing a line needs no data; the rules are checked against the file when
//! the table is loaded.

use std::path::PathBuf;

use super::condition::Condition;
use super::error::TableError;
use super::suggest::{near_matches, perhaps};
use super::ColumnKind;

/// The words of the line that leaves out rows with a missing value.
pub const DROP: &str = "drop";
pub const MISSING: &str = "missing";
/// The words that start a row filter.
pub const KEEP: &str = "keep";
pub const WHERE: &str = "where";
/// The words that keep a table's rows in its Parquet file or folder
/// (`stay on disk`, cargo feature `on_disk`).
pub const STAY: &str = "stay";
pub const ON: &str = "on";
pub const DISK: &str = "disk";
/// The words that run a table on disk's passes across machines, on an
/// Apache Ballista scheduler (`stay on disk across machines at HOST:PORT`,
/// cargo feature `across_machines`).
pub const ACROSS: &str = "across";
pub const MACHINES: &str = "machines";
pub const AT: &str = "at";
/// The word before a column's unit.
pub const IN: &str = "in";
/// The word of the column kind that may list its levels in brackets.
pub const CATEGORY: &str = "category";

/// One declared column: `name: kind[(levels)] [in unit]`.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct ColumnDecl {
    pub name: String,
    pub kind: ColumnKind,
    /// Declared level order of a category; `None` takes levels in order of
    /// first appearance.
    pub levels: Option<Vec<String>>,
    /// Unit of measurement, e.g. `cm` or `kg/tree`.
    pub unit: Option<String>,
}

/// What one line of a `table` cell body says.
#[derive(Debug, Clone, PartialEq)]
pub enum TableRule {
    /// A column's kind (and levels, unit).
    Declare(ColumnDecl),
    /// Leave out rows with a missing value instead of failing.
    DropMissing,
    /// Keep only the rows where the condition holds.
    KeepWhere(Condition),
    /// Leave the rows in the file: the engine plans the rules and a
    /// model's sums over it (`table::on_disk`); with a scheduler's address,
    /// the plans run across machines (`table::across_machines`).
    StayOnDisk { scheduler: Option<String> },
}

/// Everything a `table` cell asks for: where the data is, the declared
/// columns, the missing-value policy and the filters in the order written.
#[derive(Debug, Clone, PartialEq)]
pub struct TableSpec {
    pub name: String,
    pub path: PathBuf,
    pub declared: Vec<ColumnDecl>,
    pub drop_missing: bool,
    pub filters: Vec<Condition>,
    /// `stay on disk`: the rows are never loaded into memory.
    pub on_disk: bool,
    /// `… across machines at HOST:PORT`: the scheduler that runs the plans.
    pub scheduler: Option<String>,
}

impl TableSpec {
    /// A spec with nothing declared: every column inferred, missing values
    /// an error, no filters.
    pub fn new(name: impl Into<String>, path: impl Into<PathBuf>) -> Self {
        TableSpec {
            name: name.into(),
            path: path.into(),
            declared: Vec::new(),
            drop_missing: false,
            filters: Vec::new(),
            on_disk: false,
            scheduler: None,
        }
    }

    /// A spec from parsed body lines, in order.
    pub fn with_rules(
        name: impl Into<String>,
        path: impl Into<PathBuf>,
        rules: impl IntoIterator<Item = TableRule>,
    ) -> Result<Self, TableError> {
        let mut spec = TableSpec::new(name, path);
        for rule in rules {
            spec.add_rule(rule)?;
        }
        Ok(spec)
    }

    /// Adds one rule; a column declared twice is an error.
    pub fn add_rule(&mut self, rule: TableRule) -> Result<(), TableError> {
        match rule {
            TableRule::Declare(decl) => {
                if self.declaration(&decl.name).is_some() {
                    return Err(TableError::DuplicateDeclaration { column: decl.name.into() });
                }
                self.declared.push(decl);
            }
            TableRule::DropMissing => self.drop_missing = true,
            TableRule::KeepWhere(condition) => self.filters.push(condition),
            TableRule::StayOnDisk { scheduler } => {
                self.on_disk = true;
                self.scheduler = scheduler;
            }
        }
        Ok(())
    }

    /// The declaration of column `name`, if any.
    pub fn declaration(&self, name: &str) -> Option<&ColumnDecl> {
        self.declared.iter().find(|d| d.name == name)
    }
}

/// Reads one body line of a `table` cell (comments already stripped).
///
/// ```
/// use waypath::table::{parse_table_line, TableRule, ColumnKind};
/// let TableRule::Declare(decl) = parse_table_line("girth: real in cm").unwrap() else { panic!() };
/// assert_eq!((decl.kind, decl.unit.as_deref()), (ColumnKind::Real, Some("cm")));
/// ```
pub fn parse_table_line(text: &str) -> Result<TableRule, TableError> {
    let line = text.trim();
    let fail = |problem: String| TableError::RuleSyntax { line: line.into(), problem: problem.into() };
    let words: Vec<&str> = line.split_whitespace().collect();
    match words.as_slice() {
        [DROP, MISSING] => return Ok(TableRule::DropMissing),
        [STAY, ON, DISK] => return Ok(TableRule::StayOnDisk { scheduler: None }),
        [STAY, ON, DISK, ACROSS, MACHINES, AT, address] => {
            return scheduler_address(address).map(|a| TableRule::StayOnDisk { scheduler: Some(a) }).map_err(fail);
        }
        [STAY, ON, DISK, ..] => {
            return Err(fail(format!(
                "write \"stay on disk\", or \"stay on disk across machines at HOST:PORT\" with the address of a \
                 scheduler (e.g. {STAY} {ON} {DISK} {ACROSS} {MACHINES} {AT} 127.0.0.1:50050)"
            )))
        }
        [KEEP, WHERE, ..] => {
            let rest = line[KEEP.len()..].trim_start()[WHERE.len()..].trim();
            return Condition::parse(rest).map(TableRule::KeepWhere).map_err(fail);
        }
        _ => {}
    }
    if let Some((name, kind)) = line.split_once(':') {
        return parse_declaration(name, kind).map(TableRule::Declare).map_err(fail);
    }
    let problem = match words.first() {
        None => "the line is empty".to_string(),
        Some(&DROP) => "write \"drop missing\" to leave out rows with a missing value".to_string(),
        Some(&KEEP) => "write \"keep where\" and a condition, e.g. keep where girth > 0".to_string(),
        Some(&STAY) => "write \"stay on disk\" to keep the rows in their Parquet file".to_string(),
        Some(_) => "expected a column declaration such as \"girth: real in cm\", \"drop missing\" or \"keep where\" and a condition".to_string(),
    };
    Err(fail(problem))
}

/// A scheduler's address as `HOST:PORT` (a name or an IP address, a port
/// from 1 to 65535); `Err` says what is wrong with it.
fn scheduler_address(text: &str) -> Result<String, String> {
    let text = text.trim_matches('"');
    let Some((host, port)) = text.rsplit_once(':') else {
        return Err(format!("\"{text}\" is not an address: write HOST:PORT, e.g. 127.0.0.1:50050"));
    };
    let host_ok = !host.is_empty() && host.chars().all(|c| c.is_ascii_alphanumeric() || matches!(c, '.' | '-' | '_'));
    if !host_ok {
        return Err(format!("\"{host}\" is not a host name or IP address (write HOST:PORT, e.g. 127.0.0.1:50050)"));
    }
    match port.parse::<u16>() {
        Ok(p) if p > 0 => Ok(format!("{host}:{p}")),
        _ => Err(format!("\"{port}\" is not a port (a whole number from 1 to 65535)")),
    }
}

/// The column kinds of a declaration and the word of each.
pub const KINDS: [(&str, ColumnKind); 4] = [
    ("real", ColumnKind::Real),
    ("count", ColumnKind::Count),
    ("binary", ColumnKind::Binary),
    (CATEGORY, ColumnKind::Category),
];

/// `name` and `kind[(levels)] [in unit]` from either side of the colon.
fn parse_declaration(name: &str, rest: &str) -> Result<ColumnDecl, String> {
    let name = unquote(name.trim());
    if name.is_empty() {
        return Err("the column name before \":\" is missing".into());
    }
    let rest = rest.trim();
    let kind_len = rest.find(|c: char| !c.is_alphanumeric() && c != '_').unwrap_or(rest.len());
    let kind_word = &rest[..kind_len];
    let Some(kind) = KINDS.iter().find(|(word, _)| *word == kind_word).map(|(_, k)| k.clone()) else {
        return Err(unknown_kind(&name, kind_word));
    };
    let mut rest = rest[kind_len..].trim_start();
    let mut levels = None;
    if rest.starts_with('(') {
        if kind != ColumnKind::Category {
            return Err(format!(
                "only a category lists levels in brackets; {kind_word} takes none"
            ));
        }
        let close = closing_bracket(rest)
            .ok_or("the \"(\" of the level list is not closed; write e.g. category(dwarf, standard)")?;
        levels = Some(parse_levels(&rest[1..close])?);
        rest = rest[close + 1..].trim_start();
    }
    let unit = parse_unit(rest, kind_word)?;
    Ok(ColumnDecl { name, kind, levels, unit })
}

fn unknown_kind(name: &str, kind_word: &str) -> String {
    if kind_word.is_empty() {
        return format!("write the kind of {name} after \":\" (real, count, binary or category)");
    }
    let near = near_matches(kind_word, KINDS.iter().map(|(w, _)| *w));
    format!(
        "\"{kind_word}\" is not a column kind ({}the kinds are real, count, binary and category)",
        perhaps(&near)
    )
}

/// Byte index of the `)` closing the `(` at the start, skipping quoted text.
fn closing_bracket(text: &str) -> Option<usize> {
    let mut quoted = false;
    text.char_indices().skip(1).find_map(|(i, c)| match c {
        '"' => {
            quoted = !quoted;
            None
        }
        ')' if !quoted => Some(i),
        _ => None,
    })
}

/// Comma-separated level labels; a label holding a comma is written in quotes.
fn parse_levels(list: &str) -> Result<Vec<String>, String> {
    if list.trim().is_empty() {
        return Err("the level list is empty; list the levels, or write category alone to take them in order of appearance".into());
    }
    let mut levels: Vec<String> = Vec::new();
    let mut quoted = false;
    let mut current = String::new();
    for c in list.chars().chain(std::iter::once(',')) {
        match c {
            '"' => {
                quoted = !quoted;
                current.push(c);
            }
            ',' if !quoted => {
                let level = unquote(current.trim());
                if level.is_empty() {
                    return Err(format!("level {} in the list is empty", levels.len() + 1));
                }
                if levels.contains(&level) {
                    return Err(format!("level \"{level}\" is listed twice"));
                }
                levels.push(level);
                current.clear();
            }
            _ => current.push(c),
        }
    }
    Ok(levels)
}

/// `in <unit>` or nothing.
fn parse_unit(rest: &str, kind_word: &str) -> Result<Option<String>, String> {
    if rest.is_empty() {
        return Ok(None);
    }
    match rest.strip_prefix(IN) {
        Some("") => Err("write the unit after \"in\", e.g. real in cm".into()),
        Some(unit) if unit.starts_with(char::is_whitespace) => Ok(Some(unquote(unit.trim()))),
        _ => Err(format!(
            "unexpected \"{rest}\" after {kind_word}; write a unit as \"in cm\""
        )),
    }
}

/// Strips one pair of surrounding double quotes.
fn unquote(text: &str) -> String {
    text.strip_prefix('"')
        .and_then(|t| t.strip_suffix('"'))
        .unwrap_or(text)
        .to_string()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn quoted_level_may_hold_a_comma() {
        let TableRule::Declare(decl) =
            parse_table_line("site: category(\"north, upper\", south)").unwrap()
        else {
            panic!("expected a declaration")
        };
        assert_eq!(decl.levels.unwrap(), vec!["north, upper", "south"]);
    }
}
