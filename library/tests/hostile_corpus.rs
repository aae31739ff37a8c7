//! A generated hostile corpus run against the cell executor: random
//! statements built from the language's own words and odd tokens, random
//! bytes as CSV files and random token soups as DOT files. Whatever comes
//! in, no cell may panic, every failure must be an error with a message, and
//! the session must still answer afterwards. A watchdog interrupts any cell
//! that runs longer than a second, so a random `fit` stays cheap.

use std::panic::{catch_unwind, AssertUnwindSafe};
use std::path::Path;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Mutex;
use std::time::{Duration, Instant};

use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};

use waypath::cells::statements::grammar::statement_words;
use waypath::cells::{CellOutcome, RunControl, Session};

/// Words and tokens random statements are made of.
const TOKENS: &[&str] = &[
    "g", "m", "t", "j", "x", "y", "shade", "temp", "trout", "of", "on", "in", "from", "to", "using", "with", "laplace",
    "nuts", "draws", "chains", "settle", "doublings", "warmup", "seed", "reps", "rows", "sets", "given", "effect", "total", "direct",
    "set", "vs", "watch", "keep", "where", "and", "or", "not", "->", "<-", ",", ":", "(", ")", "[", "]", "=", "\"",
    "#", "0", "1", "-1", "2.5", "1e308", "-1e308", "nan", "inf", "10000000000", "4294967297",
    "18446744073709551616", "spline(temp, 9)", "powers(temp, 40)", "normal(0, 1)", "\"stream.csv\"", "\"missing.csv\"",
    "é", "💥", "\u{0}", "\t", "\u{feff}",
];

/// Statements close to the real forms: `#n` becomes a small number, `#v` a
/// node of the graph and `#k` an effect kind, each one time in five replaced
/// by a random token instead.
const TEMPLATES: &[&str] = &[
    "paths from #v to #v in g given #v",
    "ask #k effect of #v on #v in g",
    "fit m with laplace draws #n seed #n",
    "fit m with nuts chains #n settle #n draws #n doublings #n",
    "calibrate m reps #n with laplace draws #n",
    "simulate s from g rows #n seed #n:\n    shade = normal(#n, 1)\n    temp = normal(shade * #n, 1)\n    trout = poisson(log = #n)",
    "table t2 from \"stream.csv\":\n    keep where shade > #n and (temp < #n or not trout = #n)",
    "model m2:\n    temp from spline(shade, #n) using t",
    "model m3:\n    trout from powers(temp, #n) using t\n    family poisson",
    "prior check m sets #n seed #n",
    "implications of g",
    "graph h:\n    #v -> #v -> #v",
    "graph u:\n    é -> 💥 -> #v",
    "table t3 from \"stream.csv\":\n    shade: category(#n, #n)\n    trout: count",
    "contrast m: shade #n vs #n along shade from #n to #n by #n",
    "contrast m: shade #n vs #n on outcomes seed #n",
    "plot m estimates",
    "show #v",
    "joint j = g using t",
    "fit j with laplace draws #n seed #n",
    "intervene j: set shade #n vs #n, watch #v rows #n seed #n",
    "recover m on s with laplace draws #n",
    "implications of g checked against t with laplace draws #n",
];

/// A filler for slot kind `kind` (`n`, `v` or `k`).
fn filler(rng: &mut StdRng, kind: char) -> &'static str {
    let pool: &[&str] = match kind {
        _ if rng.random::<f64>() < 0.2 => TOKENS,
        'n' => &["1", "2", "3", "5", "9", "20", "0.5"],
        'v' => &["shade", "temp", "trout"],
        _ => &["total", "direct"],
    };
    pool[rng.random_range(0..pool.len())]
}

/// A template with its slots filled.
fn filled(rng: &mut StdRng, template: &str) -> String {
    let mut out = String::new();
    let mut chars = template.chars();
    while let Some(c) = chars.next() {
        if c == '#' {
            let kind = chars.next().unwrap_or('n');
            out.push_str(filler(rng, kind));
        } else {
            out.push(c);
        }
    }
    out
}

/// One random cell: one to three statements, sometimes with an indented body.
fn random_cell(rng: &mut StdRng, words: &[&str]) -> String {
    let mut cell = String::new();
    let statements = if rng.random::<f64>() < 0.6 { 1 } else { rng.random_range(2..=3) };
    for _ in 0..statements {
        if rng.random::<f64>() < 0.5 {
            let template = TEMPLATES[rng.random_range(0..TEMPLATES.len())];
            cell.push_str(&filled(rng, template));
            cell.push('\n');
            continue;
        }
        let mut line: Vec<&str> = vec![words[rng.random_range(0..words.len())]];
        for _ in 0..rng.random_range(0..10) {
            line.push(TOKENS[rng.random_range(0..TOKENS.len())]);
        }
        cell.push_str(&line.join(" "));
        if rng.random::<f64>() < 0.3 {
            cell.push(':');
            for _ in 0..rng.random_range(1..4) {
                let body: Vec<&str> = (0..rng.random_range(1..8)).map(|_| TOKENS[rng.random_range(0..TOKENS.len())]).collect();
                cell.push_str(&format!("\n    {}", body.join(" ")));
            }
        }
        cell.push('\n');
    }
    cell
}

/// Random bytes shaped a little like CSV (commas, quotes, line ends, a
/// byte-order mark, invalid UTF-8).
fn random_csv(rng: &mut StdRng) -> Vec<u8> {
    let pieces: &[&[u8]] = &[b",", b"\"", b"\n", b"\r\n", b"1", b"2.5", b"-", b"NA", b"yes", b"a", b"\xef\xbb\xbf", b"\xff", b"\xc3", b" ", b"1e400", b"x,y\n"];
    let mut out = Vec::new();
    if rng.random::<f64>() < 0.5 {
        out.extend_from_slice(b"a,b,c\n");
    }
    for _ in 0..rng.random_range(0..200) {
        if rng.random::<f64>() < 0.2 {
            out.push(rng.random::<u8>());
        } else {
            out.extend_from_slice(pieces[rng.random_range(0..pieces.len())]);
        }
    }
    out
}

/// A random DOT text: well-formed edge, node and group statements whose
/// tokens are then dropped, repeated or replaced at a random rate, with stray
/// bytes mixed in.
fn random_dot(rng: &mut StdRng) -> Vec<u8> {
    let names = ["a", "b", "c", "d", "\"q r\"", "a:n"];
    let noise: &[&str] = &[
        "digraph", "graph", "strict", "subgraph", "{", "}", "->", "--", "[", "]", "=", ";", ",", "hidden=true", "/*", "*/",
        "//", "#", "\n", "\"",
    ];
    let mut tokens: Vec<String> = vec!["digraph".into(), "{".into()];
    for _ in 0..rng.random_range(1..12) {
        let name = |rng: &mut StdRng| names[rng.random_range(0..names.len())].to_string();
        match rng.random_range(0..4) {
            0 => tokens.extend([name(rng), "->".into(), name(rng), ";".into()]),
            1 => tokens.extend([name(rng), "[".into(), "hidden".into(), "=".into(), "true".into(), "]".into()]),
            2 => tokens.extend(["{".into(), name(rng), name(rng), "}".into(), "->".into(), name(rng)]),
            _ => tokens.extend(["subgraph".into(), "s".into(), "{".into(), name(rng), "->".into(), name(rng), "}".into()]),
        }
    }
    tokens.push("}".into());
    let rate = rng.random::<f64>() * 0.3;
    let mut out = Vec::new();
    for token in tokens {
        let roll = rng.random::<f64>();
        if roll < rate / 3.0 {
            continue;
        } else if roll < 2.0 * rate / 3.0 {
            out.extend_from_slice(noise[rng.random_range(0..noise.len())].as_bytes());
        } else if roll < rate {
            out.push(rng.random::<u8>());
        }
        out.extend_from_slice(token.as_bytes());
        out.push(b' ');
    }
    out
}

/// Runs cells with a watchdog that interrupts any cell after a second.
struct Runner {
    cancel: AtomicBool,
    started: Mutex<Option<Instant>>,
    done: AtomicBool,
}

impl Runner {
    fn cell(&self, session: &mut Session, cell: &str) -> CellOutcome {
        self.cancel.store(false, Ordering::SeqCst);
        *self.started.lock().unwrap() = Some(Instant::now());
        let progress = |_: &str| {};
        let control = RunControl { cancel: &self.cancel, progress: &progress };
        let outcome = catch_unwind(AssertUnwindSafe(|| session.run_cell(cell, &control)));
        *self.started.lock().unwrap() = None;
        let outcome = outcome.unwrap_or_else(|_| panic!("the cell panicked:\n{cell:?}"));
        if let Some(error) = &outcome.error {
            assert!(!error.message.trim().is_empty(), "an empty error from {cell:?}");
        }
        outcome
    }

    fn watch(&self) {
        while !self.done.load(Ordering::SeqCst) {
            std::thread::sleep(Duration::from_millis(20));
            let late = self.started.lock().unwrap().is_some_and(|t| t.elapsed() > Duration::from_secs(1));
            if late {
                self.cancel.store(true, Ordering::SeqCst);
            }
        }
    }
}

/// Stops the watchdog when the test ends, also when it fails.
struct StopWatch<'a>(&'a AtomicBool);

impl Drop for StopWatch<'_> {
    fn drop(&mut self) {
        self.0.store(true, Ordering::SeqCst);
    }
}

fn stream_files(dir: &Path) {
    let mut text = String::from("shade,temp,trout\n");
    for i in 0..30 {
        let shade = (i % 5) as f64 * 0.2;
        text.push_str(&format!("{shade},{},{}\n", 18.0 - 4.0 * shade + (i % 3) as f64 * 0.3, 2 + i % 6));
    }
    std::fs::write(dir.join("stream.csv"), text).unwrap();
}

fn usable(runner: &Runner, session: &mut Session) {
    let out = runner.cell(session, "graph check:\n    a -> b\nask total effect of a on b in check\n");
    assert!(out.error.is_none(), "session not usable: {:?}", out.error);
}

#[test]
fn random_statements_csv_bytes_and_dot_soups_never_panic() {
    let dir = std::env::temp_dir().join(format!("wp-corpus-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    stream_files(&dir);
    let runner = Runner { cancel: AtomicBool::new(false), started: Mutex::new(None), done: AtomicBool::new(false) };
    let mut rng = StdRng::seed_from_u64(12);
    let words = statement_words();
    std::thread::scope(|scope| {
        scope.spawn(|| runner.watch());
        let _stop = StopWatch(&runner.done);
        let mut session = Session::new(&dir);
        let setup = "table t from \"stream.csv\"\ngraph g:\n    shade -> temp -> trout\n    shade -> trout\n\
                     model m:\n    temp from shade using t\n";
        assert!(runner.cell(&mut session, setup).error.is_none());
        let mut ran = 0;
        for k in 0..400 {
            ran += usize::from(!runner.cell(&mut session, &random_cell(&mut rng, &words)).displays.is_empty());
            if k % 50 == 0 {
                usable(&runner, &mut session);
            }
        }
        eprintln!("random cells with a statement that ran: {ran}");
        assert!(ran >= 10, "only {ran} random cells had a statement that ran, so the corpus hardly reaches the statements");
        for k in 0..150 {
            std::fs::write(dir.join(format!("r{k}.csv")), random_csv(&mut rng)).unwrap();
            let keep = ["", ":\n    keep where a > 0", ":\n    drop missing", ":\n    a: category(x, y)"][k % 4];
            runner.cell(&mut session, &format!("table r{k} from \"r{k}.csv\"{keep}\n"));
        }
        usable(&runner, &mut session);
        let mut read = 0;
        for k in 0..150 {
            std::fs::write(dir.join(format!("d{k}.dot")), random_dot(&mut rng)).unwrap();
            let out = runner.cell(&mut session, &format!("graph d{k} from \"d{k}.dot\"\n"));
            if out.error.is_none() {
                read += 1;
                runner.cell(&mut session, &format!("implications of d{k}\npaths from a to b in d{k}\nask total effect of a on c in d{k}\n"));
            }
        }
        eprintln!("random DOT files read: {read}");
        assert!(read > 0, "no random DOT file was readable, so the questions after reading were never tried");
        usable(&runner, &mut session);
    });
}
