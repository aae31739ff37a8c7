//! Columnar tables: without the cargo feature `columnar` a Parquet or Arrow
//! file is refused with the feature named; with it, the reader honours an
//! interrupt, refuses an empty folder and names the row group of a bad
//! value. Files are written here with the `parquet` crate's own writer;
//! tests/python/test_columnar_reference.py checks files written by pyarrow
//! against their CSV twins.

#[cfg(feature = "columnar")]
mod common;

use std::sync::atomic::AtomicBool;

use waypath::table::{load_table_with_cancel, parse_table_line, TableSpec};

fn spec(path: &std::path::Path, lines: &[&str]) -> TableSpec {
    let rules = lines.iter().map(|line| parse_table_line(line).expect("test lines are valid"));
    TableSpec::with_rules("streams", path, rules).expect("rules fit together")
}

#[cfg(not(feature = "columnar"))]
#[test]
fn without_the_feature_a_parquet_file_is_refused_with_the_feature_named() {
    let error = load_table_with_cancel(&spec("survey.parquet".as_ref(), &[]), &AtomicBool::new(false)).unwrap_err();
    expect_test::expect![[r#"survey.parquet is a columnar file (Parquet or Arrow), and this build of Waypath cannot read those (build it with the cargo feature "columnar", e.g. cargo build --release -p waypath-kernel --features columnar, or save the data as CSV)"#]]
    .assert_eq(&error.to_string());
}

#[cfg(feature = "columnar")]
mod with_the_feature {
    use super::*;
    use crate::common::scratch::fresh_folder;
    use std::sync::Arc;

    use arrow_array::{ArrayRef, Float64Array, RecordBatch, StringArray};
    use parquet::arrow::ArrowWriter;
    use parquet::file::properties::WriterProperties;

    /// `site` and `depth` columns written in row groups of `group_rows`.
    fn write(path: &std::path::Path, sites: &[&str], depths: &[f64], group_rows: usize) {
        let batch = RecordBatch::try_from_iter([
            ("site", Arc::new(StringArray::from(sites.to_vec())) as ArrayRef),
            ("depth", Arc::new(Float64Array::from(depths.to_vec())) as ArrayRef),
        ])
        .unwrap();
        let properties = WriterProperties::builder().set_max_row_group_row_count(Some(group_rows)).build();
        let mut writer = ArrowWriter::try_new(std::fs::File::create(path).unwrap(), batch.schema(), Some(properties)).unwrap();
        writer.write(&batch).unwrap();
        writer.close().unwrap();
    }

    #[test]
    fn an_unknown_level_is_placed_in_its_row_group() {
        let dir = fresh_folder("columnar", "level");
        let path = dir.join("survey.parquet");
        let sites = ["pool", "run", "pool", "run", "pool", "weir", "run"];
        write(&path, &sites, &[0.5; 7], 2);
        let error = load_table_with_cancel(&spec(&path, &["site: category(pool, run)"]), &AtomicBool::new(false)).unwrap_err();
        let text = error.to_string();
        // Row 6 is the second row of the third group of two.
        assert!(text.contains("survey.parquet, row group 3, row 6, column site: \"weir\""), "{text}");
    }

    #[test]
    fn an_interrupt_stops_reading() {
        let dir = fresh_folder("columnar", "interrupt");
        let path = dir.join("survey.parquet");
        write(&path, &["pool", "run"], &[0.5, 0.7], 1);
        let error = load_table_with_cancel(&spec(&path, &[]), &AtomicBool::new(true)).unwrap_err();
        assert!(error.to_string().contains("interrupted"), "{error}");
    }

    #[test]
    fn a_folder_without_parquet_files_is_refused() {
        let dir = fresh_folder("columnar", "empty");
        std::fs::write(dir.join("notes.txt"), "not data").unwrap();
        let error = load_table_with_cancel(&spec(&dir, &[]), &AtomicBool::new(false)).unwrap_err();
        assert!(error.to_string().contains("holds no .parquet files"), "{error}");
    }

    #[test]
    fn folder_rows_follow_file_name_order() {
        let dir = fresh_folder("columnar", "order");
        write(&dir.join("b.parquet"), &["run"], &[2.0], 10);
        write(&dir.join("a.parquet"), &["pool", "pool"], &[1.0, 1.5], 10);
        let (table, report) = load_table_with_cancel(&spec(&dir, &[]), &AtomicBool::new(false)).unwrap();
        assert_eq!(report.rows_read, 3);
        assert_eq!(table.column("depth").unwrap().data.as_reals().unwrap(), vec![1.0, 1.5, 2.0]);
    }

    #[test]
    fn a_session_never_writes_over_a_file_of_a_folder_it_read() {
        use waypath::cells::{RunControl, Session};
        let dir = fresh_folder("columnar", "guard");
        std::fs::create_dir(dir.join("parts")).unwrap();
        let depths = [0.2, 0.4, 0.5, 0.7, 0.9, 1.1];
        write(&dir.join("parts/a.parquet"), &["pool", "run", "pool", "run", "pool", "run"], &depths, 4);
        let before = std::fs::read(dir.join("parts/a.parquet")).unwrap();
        let mut session = Session::new(&dir);
        let cancel = AtomicBool::new(false);
        let progress = |_: &str| {};
        let control = RunControl { cancel: &cancel, progress: &progress };
        let cell = "table s from \"parts\"\nmodel m:\n    depth from site using s\nfit m with laplace seed 3\n";
        let out = session.run_cell(cell, &control);
        assert!(out.error.is_none(), "{:?}", out.error);
        let err = session.run_cell("export m draws to \"parts/a.parquet\"\n", &control).error.expect("refused");
        assert!(err.message.contains("read as data"), "{}", err.message);
        assert_eq!(std::fs::read(dir.join("parts/a.parquet")).unwrap(), before, "the data file is untouched");
    }
}
