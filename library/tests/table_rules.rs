//! Body lines of a `table` cell: what each line declares, and the error
//! sentence for each malformed line (snapshots of the reviewed wording).
//! The reference for declarations is the cell syntax in the project's
//! design notes: `name: kind[(levels)] [in unit]`, `drop missing`,
//! `keep where <condition>`.

use expect_test::expect;
use waypath::table::{
    parse_table_line, Column, ColumnData, ColumnDecl, ColumnKind, Comparison, Condition, Literal,
    TableRule, TableSpec,
};

fn declaration(line: &str) -> ColumnDecl {
    match parse_table_line(line) {
        Ok(TableRule::Declare(decl)) => decl,
        other => panic!("expected a declaration from {line:?}, got {other:?}"),
    }
}

fn problem(line: &str) -> String {
    parse_table_line(line).unwrap_err().to_string()
}

#[test]
fn every_kind_is_declared_by_name() {
    let kinds: Vec<ColumnKind> = ["a: real", "b: count", "c: binary", "d: category"]
        .iter()
        .map(|line| declaration(line).kind)
        .collect();
    assert_eq!(kinds, [ColumnKind::Real, ColumnKind::Count, ColumnKind::Binary, ColumnKind::Category]);
}

#[test]
fn levels_and_units_are_read_as_written() {
    let decl = declaration("  rootstock:   category( dwarf ,standard, \"semi, dwarfing\" )  ");
    assert_eq!(decl.name, "rootstock");
    assert_eq!(decl.levels.unwrap(), ["dwarf", "standard", "semi, dwarfing"]);
    let decl = declaration("yield: real in kg per tree");
    assert_eq!((decl.unit.as_deref(), decl.levels), (Some("kg per tree"), None));
    let decl = declaration("\"tree age\": count in years");
    assert_eq!((decl.name.as_str(), decl.unit.as_deref()), ("tree age", Some("years")));
}

#[test]
fn drop_missing_and_keep_where_are_rules() {
    assert_eq!(parse_table_line("drop   missing").unwrap(), TableRule::DropMissing);
    let rule = parse_table_line("keep where girth > -2.5e1").unwrap();
    let expected = Condition::Compare {
        column: "girth".into(),
        op: Comparison::Greater,
        value: Literal::Number { value: -25.0, text: "-2.5e1".into() },
    };
    assert_eq!(rule, TableRule::KeepWhere(expected));
}

#[test]
fn a_column_may_be_called_keep_or_drop() {
    assert_eq!(declaration("keep: binary").name, "keep");
    assert_eq!(declaration("drop: real").name, "drop");
}

#[test]
fn describe_kind_reads_back_as_the_same_declaration() {
    // Round trip: the schema shown for an inferred table can be pasted into
    // the cell and declares the same column.
    let levels = vec!["dwarf".to_string(), "semi, dwarfing".to_string(), "standard".to_string()];
    let mut column = Column::new("rootstock", ColumnData::Category { codes: vec![0, 2], levels: levels.clone() });
    column.unit = Some("type".into());
    let text = column.describe_kind();
    assert_eq!(text, "category(dwarf, \"semi, dwarfing\", standard) in type");
    let decl = declaration(&format!("rootstock: {text}"));
    assert_eq!((decl.kind, decl.levels, decl.unit), (ColumnKind::Category, Some(levels), Some("type".into())));
}

#[test]
fn a_spec_gathers_rules_in_order() {
    let lines = ["girth: real in cm", "drop missing", "keep where girth > 0", "keep where girth < 50"];
    let rules = lines.iter().map(|l| parse_table_line(l).unwrap());
    let spec = TableSpec::with_rules("trees", "orchard.csv", rules).unwrap();
    assert!(spec.drop_missing);
    assert_eq!(spec.declared.len(), 1);
    let filters: Vec<String> = spec.filters.iter().map(|f| f.to_string()).collect();
    assert_eq!(filters, ["girth > 0", "girth < 50"]);
}

#[test]
fn a_column_declared_twice_is_an_error() {
    let rules = ["girth: real", "girth: count"].map(|l| parse_table_line(l).unwrap());
    let error = TableSpec::with_rules("trees", "orchard.csv", rules).unwrap_err();
    expect![[r#"column "girth" is declared twice in the table cell (keep one declaration)"#]]
        .assert_eq(&error.to_string());
}

#[test]
fn malformed_declarations_say_what_to_write() {
    expect![[r#"table cell line "girth: reel": "reel" is not a column kind (perhaps "real"; the kinds are real, count, binary and category)"#]]
        .assert_eq(&problem("girth: reel"));
    expect![[r#"table cell line "girth:": write the kind of girth after ":" (real, count, binary or category)"#]]
        .assert_eq(&problem("girth:"));
    expect![[r#"table cell line ": real": the column name before ":" is missing"#]]
        .assert_eq(&problem(": real"));
    expect![[r#"table cell line "girth: real(thin, thick)": only a category lists levels in brackets; real takes none"#]]
        .assert_eq(&problem("girth: real(thin, thick)"));
    expect![[r#"table cell line "rootstock: category()": the level list is empty; list the levels, or write category alone to take them in order of appearance"#]]
        .assert_eq(&problem("rootstock: category()"));
    expect![[r#"table cell line "rootstock: category(dwarf, , standard)": level 2 in the list is empty"#]]
        .assert_eq(&problem("rootstock: category(dwarf, , standard)"));
    expect![[r#"table cell line "rootstock: category(dwarf, standard, dwarf)": level "dwarf" is listed twice"#]]
        .assert_eq(&problem("rootstock: category(dwarf, standard, dwarf)"));
    expect![[r#"table cell line "rootstock: category(dwarf, standard": the "(" of the level list is not closed; write e.g. category(dwarf, standard)"#]]
        .assert_eq(&problem("rootstock: category(dwarf, standard"));
    expect![[r#"table cell line "girth: real in": write the unit after "in", e.g. real in cm"#]]
        .assert_eq(&problem("girth: real in"));
    expect![[r#"table cell line "girth: real cm": unexpected "cm" after real; write a unit as "in cm""#]]
        .assert_eq(&problem("girth: real cm"));
}

#[test]
fn unrecognised_lines_say_what_a_line_can_be() {
    expect![[r#"table cell line "drop rows": write "drop missing" to leave out rows with a missing value"#]]
        .assert_eq(&problem("drop rows"));
    expect![[r#"table cell line "keep girth > 0": write "keep where" and a condition, e.g. keep where girth > 0"#]]
        .assert_eq(&problem("keep girth > 0"));
    expect![[r#"table cell line "girth real": expected a column declaration such as "girth: real in cm", "drop missing" or "keep where" and a condition"#]]
        .assert_eq(&problem("girth real"));
}

#[test]
fn stay_on_disk_is_a_rule_and_sets_the_spec() {
    assert_eq!(parse_table_line("stay  on disk").unwrap(), TableRule::StayOnDisk { scheduler: None });
    let spec = waypath::table::TableSpec::with_rules("t", "plots.parquet", [TableRule::StayOnDisk { scheduler: None }]).unwrap();
    assert!(spec.on_disk && spec.scheduler.is_none());
    let error = parse_table_line("stay here").unwrap_err().to_string();
    assert!(error.contains("write \"stay on disk\""), "{error}");
}

/// README "Across machines": `stay on disk across machines at HOST:PORT`
/// names the scheduler; an address without a host or a usable port (1 to
/// 65535, RFC 6335's range less the reserved 0) is refused with the form.
#[test]
fn across_machines_names_the_scheduler_and_refuses_bad_addresses() {
    let rule = parse_table_line("stay on disk across machines at 10.0.0.5:50050").unwrap();
    assert_eq!(rule, TableRule::StayOnDisk { scheduler: Some("10.0.0.5:50050".into()) });
    let spec = TableSpec::with_rules("t", "plots.parquet", [rule]).unwrap();
    assert!(spec.on_disk);
    assert_eq!(spec.scheduler.as_deref(), Some("10.0.0.5:50050"));
    for (line, wanted) in [
        ("stay on disk across machines at somewhere", "write HOST:PORT"),
        ("stay on disk across machines at host:0", "is not a port"),
        ("stay on disk across machines at host:65536", "is not a port"),
        ("stay on disk across machines at :50050", "is not a host name"),
        ("stay on disk across machines", "stay on disk across machines at HOST:PORT"),
        ("stay on disk elsewhere", "stay on disk across machines at HOST:PORT"),
    ] {
        let error = problem(line);
        assert!(error.contains(wanted), "{line}: {error}");
    }
}
