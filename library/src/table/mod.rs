//! Typed tables: the data a causal question is asked of.
//!
//! A [`Table`] is a set of equally long, typed columns. Category labels travel
//! with the data ([`ColumnData::Category`] keeps the level names in their
//! declared order); the integer codes are internal and never shown bare.
//!
//! Reading (CSV), schema declaration, missing-value policy and row filters
//! live in the sub-modules; every error names the file, the 1-based row as a
//! spreadsheet shows it, the column and the offending value.

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
}

/// One named column with an optional unit (e.g. `cm`, `kg/tree`).
#[derive(Debug, Clone, PartialEq)]
pub struct Column {
    pub name: String,
    pub unit: Option<String>,
    pub data: ColumnData,
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
}
