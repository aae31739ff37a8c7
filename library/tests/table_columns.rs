//! Tables built in code (simulations, Rust cells): the checks
//! `Table::from_columns` makes, row filtering, and the kind descriptions.
//! Expected rows are computed here from the inputs, not from the library.

use expect_test::expect;
use waypath::table::{Column, ColumnData, Table};

fn trees() -> Table {
    let rootstock = Column::new(
        "rootstock",
        ColumnData::Category { codes: vec![0, 1, 1, 0, 1], levels: vec!["dwarf".into(), "standard".into()] },
    );
    let mut girth = Column::new("girth", ColumnData::Real(vec![21.0, 30.5, 28.0, 19.5, 33.0]));
    girth.unit = Some("cm".into());
    let visits = Column::new("visits", ColumnData::Count(vec![2, 0, 5, 1, 3]));
    let irrigated = Column::new("irrigated", ColumnData::Binary(vec![true, false, true, true, false]));
    Table::from_columns("trees", vec![rootstock, girth, visits, irrigated]).expect("valid columns")
}

#[test]
fn filter_keeps_marked_rows_in_order_with_levels_and_units() {
    let table = trees();
    let mask = [true, false, true, false, true];
    let kept = table.filter(&mask);
    assert_eq!(kept.nrows(), mask.iter().filter(|m| **m).count());
    assert_eq!(kept.column("girth").unwrap().data, ColumnData::Real(vec![21.0, 28.0, 33.0]));
    assert_eq!(kept.column("girth").unwrap().unit.as_deref(), Some("cm"));
    assert_eq!(kept.column("visits").unwrap().data, ColumnData::Count(vec![2, 5, 3]));
    // A level with no rows left stays a level: the declared order is kept.
    let standard_only = table.filter(&[false, true, true, false, true]);
    assert_eq!(
        standard_only.column("rootstock").unwrap().data,
        ColumnData::Category { codes: vec![1, 1, 1], levels: vec!["dwarf".into(), "standard".into()] }
    );
}

#[test]
fn describe_kind_names_kind_levels_and_unit() {
    let table = trees();
    let described: Vec<String> = table.columns.iter().map(|c| c.describe_kind()).collect();
    assert_eq!(described, ["category(dwarf, standard)", "real in cm", "count", "binary"]);
}

#[test]
fn columns_of_unequal_length_are_an_error() {
    let girth = Column::new("girth", ColumnData::Real(vec![21.0, 30.5, 28.0]));
    let visits = Column::new("visits", ColumnData::Count(vec![2, 0]));
    let error = Table::from_columns("trees", vec![girth, visits]).unwrap_err();
    expect![[r#"table trees: column visits has 2 values but column girth has 3 (give every column the same number of rows)"#]]
        .assert_eq(&error.to_string());
}

#[test]
fn unusable_columns_are_errors() {
    let build = |columns: Vec<Column>| Table::from_columns("trees", columns).unwrap_err().to_string();
    expect!["table trees, column girth: value number 2 is NaN, not a finite number; replace it or leave that row out"]
        .assert_eq(&build(vec![Column::new("girth", ColumnData::Real(vec![1.0, f64::NAN]))]));
    expect!["table trees, column rootstock: value number 1 has code 2, but only 2 levels are named; name every level"]
        .assert_eq(&build(vec![Column::new(
            "rootstock",
            ColumnData::Category { codes: vec![2], levels: vec!["dwarf".into(), "standard".into()] },
        )]));
    expect![[r#"table trees, column girth: the name is used twice; give each column its own name"#]]
        .assert_eq(&build(vec![
            Column::new("girth", ColumnData::Real(vec![1.0])),
            Column::new("girth", ColumnData::Count(vec![1])),
        ]));
    expect!["table trees, column 1: the column has no name; name every column"]
        .assert_eq(&build(vec![Column::new(" ", ColumnData::Real(vec![1.0]))]));
}
