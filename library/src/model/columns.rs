//! Finding the columns a specification names, with a "did you mean" hint
//! built from near matches when a name is not in the table.

use crate::names::edit_distance;
use crate::table::{Column, ColumnData, Table};

use super::error::ModelError;

/// The column called `name`, or an error naming the table and the closest
/// column names.
pub fn find_column<'t>(table: &'t Table, name: &str) -> Result<&'t Column, ModelError> {
    table.column(name).ok_or_else(|| ModelError::UnknownColumn {
        name: name.to_string(),
        table: table.name.clone(),
        hint: near_match_hint(table, name),
    })
}

/// The level labels of a category column, or an error saying what the
/// column is instead.
pub fn category_levels<'t>(column: &'t Column, role: &str) -> Result<(&'t [u32], &'t [String]), ModelError> {
    match &column.data {
        ColumnData::Category { codes, levels } => Ok((codes, levels)),
        other => Err(ModelError::Column {
            column: column.name.clone(),
            message: format!(
                "{role} must be a category, but this column is {}; declare it as a category in the table",
                other.kind().name()
            ),
        }),
    }
}

/// The values of a numeric column as reals, or an error for a category.
pub fn real_values(column: &Column, role: &str) -> Result<Vec<f64>, ModelError> {
    column.data.as_reals().ok_or_else(|| ModelError::Column {
        column: column.name.clone(),
        message: format!("{role} must be numeric, but this column is a category"),
    })
}

fn near_match_hint(table: &Table, name: &str) -> String {
    let wanted = name.to_lowercase();
    let mut close: Vec<(usize, &str)> = table
        .column_names()
        .into_iter()
        .map(|c| (edit_distance(&wanted, &c.to_lowercase()), c))
        .filter(|(d, c)| *d <= 2.max(wanted.len() / 3) || c.to_lowercase().contains(&wanted))
        .collect();
    close.sort();
    match close.first() {
        Some((_, best)) => format!("; did you mean `{best}`?"),
        None => format!("; its columns are {}", table.column_names().join(", ")),
    }
}

