//! CSV export of draws, read back with an RFC 4180 reader (the csv crate).

use expect_test::expect;
use waypath::draws::Draws;

fn sample() -> Draws {
    Draws::from_chains(
        vec!["intercept".into(), "slope[girth, dwarf]".into()],
        vec![
            vec![vec![1.5, -0.25], vec![0.1, 3.0]],
            vec![vec![2.0, 1e-7], vec![-4.75, 0.3333333333333333]],
        ],
    )
    .expect("well-formed draws")
}

#[test]
fn csv_has_chain_draw_and_one_column_per_parameter() {
    let mut out = Vec::new();
    sample().write_csv(&mut out).expect("written to memory");
    let text = String::from_utf8(out).expect("utf-8");
    expect![[r#"
        chain,draw,intercept,"slope[girth, dwarf]"
        1,1,1.5,-0.25
        1,2,0.1,3
        2,1,2,0.0000001
        2,2,-4.75,0.3333333333333333
    "#]]
    .assert_eq(&text);
}

#[test]
fn csv_values_read_back_exactly() {
    let d = sample();
    let mut out = Vec::new();
    d.write_csv(&mut out).expect("written to memory");
    let mut reader = csv::Reader::from_reader(out.as_slice());
    let header: Vec<String> = reader.headers().expect("header").iter().map(String::from).collect();
    assert_eq!(header, ["chain", "draw", "intercept", "slope[girth, dwarf]"]);
    let mut back = vec![Vec::new(); 2];
    for record in reader.records() {
        let record = record.expect("well-formed row");
        for (p, column) in back.iter_mut().enumerate() {
            column.push(record[p + 2].parse::<f64>().expect("a number"));
        }
    }
    assert_eq!(back, d.values);
}
