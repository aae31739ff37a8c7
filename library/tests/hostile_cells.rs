//! What a hostile cell or data file can send: deeply nested input, sizes
//! with no sensible bound, out-of-range numbers, unrepresentable scales and
//! interrupts during long work. Every case must end in one clear error that
//! names the cell line and the limit, with the process alive (these tests
//! run on the test harness's ordinary 2 MiB threads) and the session usable.

use std::io::Write;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::{Duration, Instant};

use waypath::cells::{CellOutcome, RunControl, Session};

fn run_with(session: &mut Session, cell: &str, cancel: &AtomicBool) -> CellOutcome {
    let progress = |_: &str| {};
    session.run_cell(cell, &RunControl { cancel, progress: &progress })
}

fn run(session: &mut Session, cell: &str) -> CellOutcome {
    run_with(session, cell, &AtomicBool::new(false))
}

/// The error of a cell that must fail, as the scientist reads it.
fn error_of(session: &mut Session, cell: &str) -> String {
    let out = run(session, cell);
    out.error.unwrap_or_else(|| panic!("expected an error from {:.80}", cell)).describe()
}

/// The session still answers: a new graph and a question of it.
fn assert_usable(session: &mut Session) {
    let out = run(session, "graph after:\n    a -> b\nask total effect of a on b in after\n");
    assert!(out.error.is_none(), "session not usable afterwards: {:?}", out.error);
}

/// A fresh folder for one test's files.
fn folder(test: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("wp-hostile-{}-{test}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

/// Invented stream survey: shading, water temperature and trout counts.
fn stream_csv(dir: &Path) {
    let mut f = std::fs::File::create(dir.join("stream.csv")).unwrap();
    writeln!(f, "shade,temp,trout").unwrap();
    for i in 0..40 {
        let shade = (i % 5) as f64 * 0.2;
        let temp = 18.0 - 4.0 * shade + ((i * 7) % 11) as f64 * 0.1;
        writeln!(f, "{shade},{temp},{}", 3 + (i * 3) % 7).unwrap();
    }
}

/// A session with the stream table, its graph and a model.
fn stream_session(dir: &Path) -> Session {
    stream_csv(dir);
    let mut session = Session::new(dir);
    let out = run(
        &mut session,
        "table stream from \"stream.csv\"\ngraph g:\n    shade -> temp -> trout\n    shade -> trout\n\
         model m:\n    temp from shade using stream\n",
    );
    assert!(out.error.is_none(), "{:?}", out.error);
    session
}

#[test]
fn a_condition_with_20000_nested_parentheses_is_refused() {
    let dir = folder("parens");
    let mut session = stream_session(&dir);
    let condition = format!("{}shade > 0{}", "(".repeat(20_000), ")".repeat(20_000));
    let error = error_of(&mut session, &format!("table deep from \"stream.csv\":\n    keep where {condition}\n"));
    assert!(error.starts_with("cell line 2:") && error.contains("deeper than 200 levels"), "{error}");
    // A long chain of `or` builds a tree as deep as the chain.
    let chain = vec!["shade > 0"; 5000].join(" or ");
    let error = error_of(&mut session, &format!("table deep from \"stream.csv\":\n    keep where {chain}\n"));
    assert!(error.contains("deeper than 200 levels"), "{error}");
    // Nesting below the limit is still read: 150 parentheses keep the rows with shade > 0.
    let fine = format!("{}shade > 0{}", "(".repeat(150), ")".repeat(150));
    let out = run(&mut session, &format!("table shaded from \"stream.csv\":\n    keep where {fine}\n"));
    assert!(out.error.is_none(), "{:?}", out.error);
    let nots = format!("{}shade > 0", "not ".repeat(50_000));
    assert!(error_of(&mut session, &format!("table deep from \"stream.csv\":\n    keep where {nots}\n")).contains("deeper than 200"));
    assert_usable(&mut session);
}

#[test]
fn a_mechanism_with_200000_minus_signs_is_refused() {
    let mut session = Session::new(".");
    let minus = "-".repeat(200_000);
    let cell = format!("graph g:\n    a -> b\nsimulate fake from g rows 10 seed 1:\n    a = normal({minus}1, 1)\n    b = normal(a, 1)\n");
    let error = error_of(&mut session, &cell);
    assert!(error.contains("line 4") && error.contains("deeper than 200 levels"), "{error}");
    // 150 minus signs in a row are still read (an even count: the value itself).
    let fine = format!("graph g:\n    a -> b\nsimulate fine from g rows 10 seed 1:\n    a = normal({}1, 1)\n    b = normal(a, 1)\n", "-".repeat(150));
    let out = run(&mut session, &fine);
    assert!(out.error.is_none(), "{:?}", out.error);
    let sum = vec!["a"; 10_000].join(" + ");
    let cell = format!("graph g:\n    a -> b\nsimulate fake from g rows 10 seed 1:\n    a = normal(0, 1)\n    b = normal({sum}, 1)\n");
    assert!(error_of(&mut session, &cell).contains("deeper than 200 levels"));
    let brackets = format!("{}a{}", "(".repeat(100_000), ")".repeat(100_000));
    let cell = format!("graph g:\n    a -> b\nsimulate fake from g rows 10 seed 1:\n    a = normal(0, 1)\n    b = normal({brackets}, 1)\n");
    assert!(error_of(&mut session, &cell).contains("deeper than 200 levels"));
    assert_usable(&mut session);
}

#[test]
fn a_dot_file_with_200000_nested_braces_is_refused() {
    let dir = folder("dot");
    std::fs::write(dir.join("deep.dot"), format!("digraph {{ {} a -> b {} }}", "{".repeat(200_000), "}".repeat(200_000))).unwrap();
    let mut session = Session::new(&dir);
    let error = error_of(&mut session, "graph deep from \"deep.dot\"");
    assert!(error.starts_with("cell line 1: deep.dot") && error.contains("nest deeper than 100 levels"), "{error}");
    // 3000 × 3000 edges from one statement is past the edge limit.
    let left: Vec<String> = (0..3000).map(|i| format!("a{i}")).collect();
    let right: Vec<String> = (0..3000).map(|i| format!("b{i}")).collect();
    std::fs::write(dir.join("wide.dot"), format!("digraph {{ {{{}}} -> {{{}}} }}", left.join(" "), right.join(" "))).unwrap();
    let error = error_of(&mut session, "graph wide from \"wide.dot\"");
    assert!(error.contains("more than 1000000 edges"), "{error}");
    // A large graph that is accepted is described briefly, without a figure.
    let chain: Vec<String> = (0..5000).map(|i| format!("c{i}")).collect();
    std::fs::write(dir.join("long.dot"), format!("digraph {{ {} }}", chain.join(" -> "))).unwrap();
    let out = run(&mut session, "graph long from \"long.dot\"");
    assert!(out.error.is_none(), "{:?}", out.error);
    assert!(out.displays[0].plain.contains("too large to list") && out.displays[0].svg.is_none(), "{:.300}", out.displays[0].plain);
    assert!(out.displays[0].plain.len() < 1000);
    assert_usable(&mut session);
}

#[test]
fn sizes_past_the_memory_are_refused_with_the_estimate() {
    let dir = folder("sizes");
    let mut session = stream_session(&dir);
    let cells = [
        "calibrate m reps 10000000000",
        "simulate fake from g rows 10000000000 seed 1:\n    shade = normal(0, 1)\n    temp = normal(shade, 1)\n    trout = normal(temp, 1)\n",
        "fit m with laplace draws 10000000000",
        "fit m with nuts draws 10000000000",
        "model wiggly:\n    temp from spline(shade, 10000000000) using stream\n",
    ];
    for cell in cells {
        let error = error_of(&mut session, cell);
        // The refusal gives the estimate and the machine's memory, in one sentence.
        assert!(error.starts_with("cell line") && error.contains("would need about") && error.contains("available"), "{cell}: {error}");
    }
    let out = run(&mut session, "joint whole = g using stream\nfit whole with laplace draws 200 seed 3");
    assert!(out.error.is_none(), "{:?}", out.error);
    let error = error_of(&mut session, "intervene whole: set shade 1 vs 0, watch trout rows 10000000000 seed 2");
    assert!(error.contains("would need about") && error.contains("available"), "{error}");
    assert_usable(&mut session);
}

#[test]
fn numbers_out_of_their_range_are_errors() {
    let dir = folder("ranges");
    let mut session = stream_session(&dir);
    // 4294967297 = 2^32 + 1, which a 32-bit cast turns into 1.
    let error = error_of(&mut session, "fit m with nuts doublings 4294967297");
    assert!(error.starts_with("cell line 1:"), "{error}");
    assert!(error.contains("doublings takes a whole number from 1 to 30, not 4294967297"), "{error}");
    let error = error_of(&mut session, "fit m with nuts chains 100000");
    assert!(error.contains("chains takes a whole number from 1 to 64"), "{error}");
    let error = error_of(&mut session, "fit m with nuts settle 99999999999");
    assert!(error.contains("settle takes a whole number from 0 to 1000000"), "{error}");
    let error = error_of(&mut session, "fit m with nuts acceptance 1");
    assert!(error.contains("acceptance takes a number between 0 and 1 (exclusive), not \"1\""), "{error}");
    let error = error_of(&mut session, "prior check m sets 10000000000");
    assert!(error.contains("sets takes a whole number from 1 to 100000, not 10000000000"), "{error}");
    let error = error_of(&mut session, "fit m with laplace seed 99999999999999999999999");
    assert!(error.contains("seed takes a whole number from 0 to 2^64 − 1"), "{error}");
    assert_usable(&mut session);
}

#[test]
fn values_near_1e200_are_named_at_model_build() {
    let dir = folder("scales");
    let mut f = std::fs::File::create(dir.join("huge.csv")).unwrap();
    writeln!(f, "dose,response").unwrap();
    for i in 0..20 {
        writeln!(f, "{:e},{}", (i as f64 + 0.5) * 1e199, (i % 3) as f64 + 0.5).unwrap();
    }
    drop(f);
    let mut session = Session::new(&dir);
    let error = error_of(&mut session, "table huge from \"huge.csv\"\nmodel m:\n    response from dose using huge\n");
    // The default prior of a slope divides by the predictor's spread, and squares of
    // deviations near 1e200 overflow IEEE 754 doubles (largest about 1.8e308).
    assert!(error.contains("line 3") && error.contains("dose") && error.contains("cannot be represented") && error.contains("rescale"), "{error}");
    assert_usable(&mut session);
}

#[test]
fn a_set_interrupt_stops_every_long_statement_and_keeps_the_session() {
    let dir = folder("interrupt");
    let mut session = stream_session(&dir);
    let out = run(
        &mut session,
        "joint whole = g using stream\nfit whole with laplace draws 100 seed 3\n\
         simulate made from g rows 50 seed 1:\n    shade = normal(0, 1)\n    temp = normal(shade, 1)\n    trout = normal(temp, 1)\n",
    );
    assert!(out.error.is_none(), "{:?}", out.error);
    let cells = [
        "table again from \"stream.csv\"",
        "paths from shade to trout in g",
        "ask direct effect of shade on trout in g",
        "implications of g",
        "implications of g checked against stream with laplace",
        "fit m with laplace",
        "calibrate m reps 20 with laplace",
        "simulate fake from g rows 100 seed 1:\n    shade = normal(0, 1)\n    temp = normal(shade, 1)\n    trout = normal(temp, 1)\n",
        "intervene whole: set shade 1 vs 0, watch trout seed 2",
        "ask total effect of shade on trout in g using stream with laplace",
        "recover m on made with laplace",
    ];
    let cancel = AtomicBool::new(true);
    for cell in cells {
        let out = run_with(&mut session, cell, &cancel);
        let error = out.error.unwrap_or_else(|| panic!("{cell} ran to the end although interrupted")).describe();
        assert!(error.starts_with("cell line 1:") && error.contains("interrupted"), "{cell}: {error}");
    }
    assert!(session.table("again").is_none(), "an interrupted table must not be stored");
    assert_usable(&mut session);
}

#[test]
fn an_interrupt_during_a_long_calibration_ends_the_cell_within_a_second() {
    let dir = folder("interrupt-timing");
    let mut session = stream_session(&dir);
    let cancel = AtomicBool::new(false);
    let set_at = std::sync::Mutex::new(None);
    let out = std::thread::scope(|scope| {
        scope.spawn(|| {
            std::thread::sleep(Duration::from_millis(300));
            *set_at.lock().unwrap() = Some(Instant::now());
            cancel.store(true, Ordering::SeqCst);
        });
        run_with(&mut session, "calibrate m reps 1000000 with laplace draws 200", &cancel)
    });
    let ended = Instant::now();
    let set_at = set_at.lock().unwrap().expect("the interrupt was sent");
    assert!(out.error.as_ref().is_some_and(|e| e.message.contains("interrupted")), "{:?}", out.error);
    assert!(ended - set_at < Duration::from_secs(1), "took {:?} after the interrupt", ended - set_at);
    assert_usable(&mut session);
}

#[test]
fn a_header_of_100000_columns_with_a_repeat_is_checked_in_linear_time() {
    let dir = folder("header");
    let mut header: Vec<String> = (0..100_000).map(|i| format!("c{i}")).collect();
    header.push("c5".into());
    let row = vec!["1"; header.len()].join(",");
    std::fs::write(dir.join("wide.csv"), format!("{}\n{row}\n", header.join(","))).unwrap();
    let mut session = Session::new(&dir);
    let started = Instant::now();
    let error = error_of(&mut session, "table wide from \"wide.csv\"");
    assert!(error.contains("\"c5\" appears twice, as columns 6 and 100001"), "{error}");
    // The quadratic check took about 36 s here; a linear one takes milliseconds.
    assert!(started.elapsed() < Duration::from_secs(5), "took {:?}", started.elapsed());
}

#[test]
fn paths_in_a_dense_graph_are_cut_with_exact_counts() {
    // A complete DAG on 14 nodes n0 -> … -> n13 (every forward pair joined):
    // a directed path from n0 to n13 chooses any subset of the 12 inner nodes,
    // so there are 2^12 = 4096 of them (a counting argument).
    let mut lines = String::new();
    for i in 0..14 {
        for j in i + 1..14 {
            lines.push_str(&format!("    n{i} -> n{j}\n"));
        }
    }
    let mut session = Session::new(".");
    let out = run(&mut session, &format!("graph dense:\n{lines}paths from n0 to n13 in dense\n"));
    assert!(out.error.is_none(), "{:?}", out.error);
    let display = &out.displays[1];
    assert!(display.plain.contains("the first 2000 listed"), "{}", display.plain);
    assert!(display.plain.contains("directed (causal) paths between n0 and n13: 4096"), "{}", display.plain);
    let json = display.json.as_ref().unwrap();
    assert_eq!(json["complete"], false);
    assert_eq!(json["paths"].as_array().unwrap().len(), 2000);
    // In a complete graph on 7 nodes, the simple paths between two nodes number
    // Σ_{k=0..5} 5!/(5−k)! = 1 + 5 + 20 + 60 + 120 + 120 = 326 (ordered choices of inner nodes).
    let mut small = String::new();
    for i in 0..7 {
        for j in i + 1..7 {
            small.push_str(&format!("    m{i} -> m{j}\n"));
        }
    }
    let out = run(&mut session, &format!("graph small:\n{small}paths from m0 to m6 in small\n"));
    assert!(out.displays[1].plain.contains("326 found"), "{}", out.displays[1].plain);
}

#[test]
fn thirty_confounders_give_one_set_without_a_subset_search() {
    // Backdoor criterion (Pearl 2009, Def. 3.3.1): each c_i opens x <- c_i -> y,
    // and nothing else blocks it, so the one minimal set holds all thirty.
    let mut lines = String::from("    x -> y\n");
    for i in 0..30 {
        lines.push_str(&format!("    c{i} -> x\n    c{i} -> y\n"));
    }
    let mut session = Session::new(".");
    let out = run(&mut session, &format!("graph wide:\n{lines}ask total effect of x on y in wide\n"));
    assert!(out.error.is_none(), "{:?}", out.error);
    let sets = out.displays[1].json.as_ref().unwrap()["adjustment_sets"].as_array().unwrap().clone();
    assert_eq!(sets.len(), 1);
    assert_eq!(sets[0].as_array().unwrap().len(), 30);
}

#[test]
fn ten_two_way_choices_list_sixty_four_sets_and_say_the_list_is_cut() {
    // Ten backdoor paths x <- u_i -> v_i -> y, each blocked by u_i or by v_i:
    // the minimal sets are the 2^10 = 1024 ways to pick one of each pair.
    let mut lines = String::from("    x -> y\n");
    for i in 0..10 {
        lines.push_str(&format!("    u{i} -> x\n    u{i} -> v{i} -> y\n"));
    }
    let mut session = Session::new(".");
    let out = run(&mut session, &format!("graph pairs:\n{lines}ask total effect of x on y in pairs\n"));
    assert!(out.error.is_none(), "{:?}", out.error);
    let display = &out.displays[1];
    let sets = display.json.as_ref().unwrap()["adjustment_sets"].as_array().unwrap().clone();
    assert_eq!(sets.len(), 64);
    for set in &sets {
        let names: Vec<&str> = set.as_array().unwrap().iter().map(|v| v.as_str().unwrap()).collect();
        assert_eq!(names.len(), 10, "{names:?}");
        for i in 0..10 {
            let (u, v) = (format!("u{i}"), format!("v{i}"));
            assert!(names.contains(&u.as_str()) != names.contains(&v.as_str()), "{names:?}");
        }
    }
    assert!(display.plain.contains("further minimal sets may exist"), "{}", display.plain);
}

#[test]
fn a_csv_file_larger_than_the_memory_is_refused_before_reading() {
    let dir = folder("huge-file");
    // A sparse file of 1 TiB: no disk is used, but its table would need terabytes.
    let file = std::fs::File::create(dir.join("huge.csv")).unwrap();
    file.set_len(1 << 40).unwrap();
    drop(file);
    let mut session = Session::new(&dir);
    let error = error_of(&mut session, "table huge from \"huge.csv\"");
    assert!(error.starts_with("cell line 1:") && error.contains("would need about") && error.contains("available"), "{error}");
    std::fs::remove_file(dir.join("huge.csv")).unwrap();
    assert_usable(&mut session);
}

#[test]
fn a_dot_file_with_a_cycle_through_200000_nodes_is_refused_with_a_short_message() {
    let dir = folder("cycle");
    let chain: Vec<String> = (0..200_000).map(|i| format!("n{i}")).collect();
    std::fs::write(dir.join("ring.dot"), format!("digraph {{ {} -> n0 }}", chain.join(" -> "))).unwrap();
    let mut session = Session::new(&dir);
    let started = Instant::now();
    let error = error_of(&mut session, "graph ring from \"ring.dot\"");
    assert!(error.contains("has a cycle n0 -> n1 -> ") && error.contains("more nodes"), "{:.300}", error);
    assert!(error.len() < 1000, "the message runs to {} characters", error.len());
    // The walk that finds the cycle used to search its own list at every step
    // (quadratic: minutes for 200 000 nodes); it is linear now.
    assert!(started.elapsed() < Duration::from_secs(10), "took {:?}", started.elapsed());
    assert_usable(&mut session);
}

#[test]
fn a_question_naming_50000_conditioning_nodes_is_answered_without_a_quadratic_check() {
    // A chain s -> n0 -> n1 -> … -> n49999 -> t; conditioning on every inner node
    // blocks the one path (a conditioned non-collider blocks it, Pearl 2009 Def. 1.2.3).
    let inner: Vec<String> = (0..50_000).map(|i| format!("n{i}")).collect();
    let mut session = Session::new(".");
    let chain = format!("graph long:\n    s -> {} -> t\n", inner.join(" -> "));
    assert!(run(&mut session, &chain).error.is_none());
    let started = Instant::now();
    let out = run(&mut session, &format!("paths from s to t in long given {}", inner.join(", ")));
    assert!(out.error.is_none(), "{:?}", out.error);
    assert!(out.displays[0].plain.contains("1 found, 0 open"), "{:.200}", out.displays[0].plain);
    // Checking 50 000 names against each other pairwise took minutes; with a mask it is
    // immediate. The one path, 50 002 nodes drawn in one table cell, is wider than a
    // formatting width may be (65 535), which used to panic.
    assert!(started.elapsed() < Duration::from_secs(10), "took {:?}", started.elapsed());
}
