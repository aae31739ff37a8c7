//! Typed tables: the data a causal question is asked of.
//!
//! A [`Table`] is a set of equally long, typed columns. Category labels travel
//! with the data ([`ColumnData::Category`] keeps the level names in their
//! declared order); the integer codes are internal and never shown bare.
//!
//! Reading (CSV), schema declaration, missing-value policy and row filters
//! live in the sub-modules; every error names the file, the 1-based row as a
//! spreadsheet shows it, the column and the offending value.
//!
//! * [`rules`]: one line of a `table` cell body → [`TableRule`]; the rules
//!   gather into a [`TableSpec`].
//! * [`load`]: CSV → typed [`Table`] plus a [`LoadReport`] ([`load_table`],
//!   [`Table::from_csv_reader`]).
//! * [`columnar`]: Parquet files, folders of them and Arrow IPC files, typed
//!   by the same steps as CSV (cargo feature `columnar`; without it such a
//!   file is refused with the feature named).
//! * `on_disk`: tables whose rows stay in their Parquet file, the engine
//!   planning the rules and a fit's sums (cargo feature `on_disk`), and
//!   `across_machines`: the same plans on an Apache Ballista scheduler
//!   (cargo feature `across_machines`).
//! * [`condition`]: `keep where` conditions.
//! * [`report`]: what loading did, and [`summary_json`] for the cells module.
//! * [`error`]: [`TableError`], one sentence per failure.
//!
//! Parsing and loading never render; the cells module does.

pub mod columnar;
#[cfg(feature = "on_disk")]
pub mod on_disk;
#[cfg(feature = "across_machines")]
pub mod across_machines;
pub mod condition;
pub mod error;
pub mod load;
pub mod report;
pub mod rules;
mod suggest;
mod values;

pub use condition::{Comparison, Condition, Literal};
pub use error::TableError;
pub use load::{load_table, load_table_with_cancel};
pub use report::{summary_json, ColumnReport, FilterReport, LoadReport};
pub use rules::{parse_table_line, ColumnDecl, TableRule, TableSpec};

/// The kind of a column, as declared in a `table` cell or inferred.
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "lowercase")]
pub enum ColumnKind {
    Real,
    Count,
    Binary,
    Category,
}

impl ColumnKind {
    pub fn name(&self) -> &'static str {
        match self {
            ColumnKind::Real => "real",
            ColumnKind::Count => "count",
            ColumnKind::Binary => "binary",
            ColumnKind::Category => "category",
        }
    }
}

/// The values of one column.
#[derive(Debug, Clone, PartialEq)]
pub enum ColumnData {
    /// Finite real numbers.
    Real(Vec<f64>),
    /// Non-negative integers.
    Count(Vec<u64>),
    /// Yes/no values.
    Binary(Vec<bool>),
    /// Category codes (index into `levels`), with the level labels in order.
    Category { codes: Vec<u32>, levels: Vec<String> },
}

impl ColumnData {
    pub fn len(&self) -> usize {
        match self {
            ColumnData::Real(v) => v.len(),
            ColumnData::Count(v) => v.len(),
            ColumnData::Binary(v) => v.len(),
            ColumnData::Category { codes, .. } => codes.len(),
        }
    }

    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    pub fn kind(&self) -> ColumnKind {
        match self {
            ColumnData::Real(_) => ColumnKind::Real,
            ColumnData::Count(_) => ColumnKind::Count,
            ColumnData::Binary(_) => ColumnKind::Binary,
            ColumnData::Category { .. } => ColumnKind::Category,
        }
    }

    /// The value of row `i` as a real number (counts and binaries convert;
    /// categories give `None`).
    pub fn real_at(&self, i: usize) -> Option<f64> {
        match self {
            ColumnData::Real(v) => Some(v[i]),
            ColumnData::Count(v) => Some(v[i] as f64),
            ColumnData::Binary(v) => Some(if v[i] { 1.0 } else { 0.0 }),
            ColumnData::Category { .. } => None,
        }
    }

    /// The whole column as real numbers, or `None` for a category.
    pub fn as_reals(&self) -> Option<Vec<f64>> {
        match self {
            ColumnData::Real(v) => Some(v.clone()),
            ColumnData::Count(v) => Some(v.iter().map(|&x| x as f64).collect()),
            ColumnData::Binary(v) => Some(v.iter().map(|&b| if b { 1.0 } else { 0.0 }).collect()),
            ColumnData::Category { .. } => None,
        }
    }

    /// Level labels of a category column.
    pub fn levels(&self) -> Option<&[String]> {
        match self {
            ColumnData::Category { levels, .. } => Some(levels),
            _ => None,
        }
    }

    /// The rows where `mask` is true, in order (`mask` has one entry per row).
    pub fn filter(&self, mask: &[bool]) -> ColumnData {
        fn keep<T: Copy>(values: &[T], mask: &[bool]) -> Vec<T> {
            values.iter().zip(mask).filter(|(_, m)| **m).map(|(v, _)| *v).collect()
        }
        match self {
            ColumnData::Real(v) => ColumnData::Real(keep(v, mask)),
            ColumnData::Count(v) => ColumnData::Count(keep(v, mask)),
            ColumnData::Binary(v) => ColumnData::Binary(keep(v, mask)),
            ColumnData::Category { codes, levels } => {
                ColumnData::Category { codes: keep(codes, mask), levels: levels.clone() }
            }
        }
    }

    /// Why the values cannot stand in a table (a non-finite real, a category
    /// code without a level), or `None` when they can.
    fn invalid_value(&self) -> Option<String> {
        match self {
            ColumnData::Real(v) => v.iter().position(|x| !x.is_finite()).map(|i| {
                format!("value number {} is {}, not a finite number; replace it or leave that row out", i + 1, v[i])
            }),
            ColumnData::Category { codes, levels } => {
                codes.iter().position(|&c| c as usize >= levels.len()).map(|i| {
                    format!(
                        "value number {} has code {}, but only {} levels are named; name every level",
                        i + 1,
                        codes[i],
                        levels.len()
                    )
                })
            }
            ColumnData::Count(_) | ColumnData::Binary(_) => None,
        }
    }
}

/// One named column with an optional unit (e.g. `cm`, `kg/tree`).
#[derive(Debug, Clone, PartialEq)]
pub struct Column {
    pub name: String,
    pub unit: Option<String>,
    pub data: ColumnData,
    /// A category whose level order was stated (a `table` cell's
    /// `c: category(a, b, c)`, a simulated category's mechanism), so the
    /// order means something: lowest first. Levels in order of first
    /// appearance are not ordered.
    pub ordered: bool,
}

impl Column {
    /// A column without a unit (a category's levels not ordered).
    pub fn new(name: impl Into<String>, data: ColumnData) -> Self {
        Column { name: name.into(), unit: None, data, ordered: false }
    }

    /// The same column, its category levels in a stated order.
    pub fn with_stated_order(self) -> Self {
        Column { ordered: true, ..self }
    }

    /// The kind as a `table` cell declares it, so an inferred schema can be
    /// pasted back into the cell: `real in cm`, `count`,
    /// `category(dwarf, standard)`.
    pub fn describe_kind(&self) -> String {
        let mut text = self.data.kind().name().to_string();
        if let Some(levels) = self.data.levels() {
            let written: Vec<String> = levels.iter().map(|l| quote_level(l)).collect();
            text = format!("{text}({})", written.join(", "));
        }
        if let Some(unit) = &self.unit {
            text = format!("{text} in {unit}");
        }
        text
    }
}

/// A level label as written in a declaration: quoted when it holds a comma,
/// a bracket, a quote or surrounding space.
fn quote_level(level: &str) -> String {
    let plain = !level.is_empty()
        && level.trim() == level
        && !level.contains([',', '(', ')', '"']);
    if plain {
        level.to_string()
    } else {
        format!("\"{level}\"")
    }
}

/// A named table of equally long columns.
#[derive(Debug, Clone, PartialEq)]
pub struct Table {
    pub name: String,
    pub columns: Vec<Column>,
}

impl Table {
    /// Number of rows (0 for a table without columns).
    pub fn nrows(&self) -> usize {
        self.columns.first().map(|c| c.data.len()).unwrap_or(0)
    }

    pub fn column(&self, name: &str) -> Option<&Column> {
        self.columns.iter().find(|c| c.name == name)
    }

    pub fn column_names(&self) -> Vec<&str> {
        self.columns.iter().map(|c| c.name.as_str()).collect()
    }

    /// A table from columns built in code (a simulation, a Rust cell), checked
    /// as a loaded table would be: unique non-empty names, equal lengths,
    /// finite reals and category codes that name a level.
    ///
    /// ```
    /// use waypath::table::{Column, ColumnData, Table};
    /// let girth = Column::new("girth", ColumnData::Real(vec![21.0, 30.5]));
    /// let visits = Column::new("visits", ColumnData::Count(vec![3]));
    /// assert!(Table::from_columns("trees", vec![girth, visits]).is_err());
    /// ```
    pub fn from_columns(name: impl Into<String>, columns: Vec<Column>) -> Result<Table, TableError> {
        let table = name.into();
        let invalid = |column: &Column, problem: String| TableError::InvalidColumn {
            table: table.as_str().into(),
            column: column.name.as_str().into(),
            problem: problem.into(),
        };
        let mut names: std::collections::HashSet<&str> = std::collections::HashSet::with_capacity(columns.len());
        for (i, column) in columns.iter().enumerate() {
            if column.name.trim().is_empty() {
                return Err(TableError::InvalidColumn {
                    table: table.as_str().into(),
                    column: (i + 1).to_string().into(),
                    problem: "the column has no name; name every column".into(),
                });
            }
            if !names.insert(column.name.as_str()) {
                return Err(invalid(column, "the name is used twice; give each column its own name".into()));
            }
            let first = &columns[0];
            if column.data.len() != first.data.len() {
                return Err(TableError::UnequalLengths {
                    table: table.as_str().into(),
                    column: column.name.as_str().into(),
                    found: column.data.len(),
                    first: first.name.as_str().into(),
                    expected: first.data.len(),
                });
            }
            if let Some(problem) = column.data.invalid_value() {
                return Err(invalid(column, problem));
            }
        }
        Ok(Table { name: table, columns })
    }

    /// The rows where `mask` is true, in order, under the same name.
    ///
    /// # Panics
    /// If `mask` does not have one entry per row: a mask is built from the
    /// table itself, so a wrong length is a bug in the caller.
    pub fn filter(&self, mask: &[bool]) -> Table {
        assert_eq!(mask.len(), self.nrows(), "row mask length must equal the number of rows");
        Table {
            name: self.name.clone(),
            columns: self
                .columns
                .iter()
                .map(|c| Column { name: c.name.clone(), unit: c.unit.clone(), data: c.data.filter(mask), ordered: c.ordered })
                .collect(),
        }
    }
}
