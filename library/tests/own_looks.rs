//! Keep it so: Waypath's figure words and looks stay its own (issue 14,
//! items 6 and 10–15). The figure words of earlier versions are refused with
//! the new word named, the grammar, README and demo notebooks no longer
//! use them, the series colours and the open-path mark stay Waypath's, the
//! README shows the committed demo figures, and the new figures' numbers
//! follow their published definitions.

mod common;

use common::cells::run;

use std::path::PathBuf;

use rand::rngs::StdRng;
use rand::SeedableRng;
use rand_distr::{Distribution, Normal};
use statrs::distribution::{Continuous, ContinuousCDF, Normal as NormalDist};

use waypath::cells::statements::grammar::{next_words, PLOT, PLOT_KINDS, RETIRED_PLOT_KINDS};
use waypath::cells::Session;
use waypath::plot::palette::{self, BLUE, BLUISH_GREEN, ORANGE, REDDISH_PURPLE, VERMILLION};
use waypath::plot::*;

/// The repository, from the `CARGO_MANIFEST_DIR` cargo sets when it runs
/// the test (a binary reused from a clone elsewhere keeps its build path).
fn repo() -> PathBuf {
    let manifest = std::env::var_os("CARGO_MANIFEST_DIR").map(PathBuf::from);
    let manifest = manifest.unwrap_or_else(|| PathBuf::from(env!("CARGO_MANIFEST_DIR")));
    manifest.parent().expect("library/ sits in the repository").to_path_buf()
}

fn normals(seed: u64, n: usize, mean: f64, sd: f64) -> Vec<f64> {
    let mut rng = StdRng::seed_from_u64(seed);
    let d = Normal::new(mean, sd).expect("valid normal");
    (0..n).map(|_| d.sample(&mut rng)).collect()
}

/// The figure words a diagnostics library of another program uses as its
/// plotting function names (issue 14, item 6), and the old spline word.
const OLD_WORDS: [&str; 4] = ["posterior", "trace", "rank", "basis"];

// ---------------------------------------------------------------- words

#[test]
fn the_grammar_offers_the_new_figure_words_and_none_of_the_old() {
    for old in OLD_WORDS {
        assert!(!PLOT_KINDS.contains(&old), "{old} is back among the plot kinds");
        assert!(!PLOT.usage.contains(old), "the plot usage names {old}: {}", PLOT.usage);
        assert!(RETIRED_PLOT_KINDS.iter().any(|(o, _)| *o == old), "{old} has no successor named");
    }
    let offered = next_words("plot m").words;
    for new in ["estimates", "mixing", "lines", "spline"] {
        assert!(offered.contains(&new), "completion after `plot m` lacks {new}: {offered:?}");
    }
    assert!(OLD_WORDS.iter().all(|w| !offered.contains(w)), "{offered:?}");
}

/// Each old word gets an error at the cell's line that names the new word
/// and the full form, before any model is looked up.
#[test]
fn an_old_figure_word_is_refused_with_the_new_word_named() {
    let mut session = Session::new(std::env::temp_dir());
    for (old, new) in [("posterior", "estimates"), ("trace", "mixing"), ("rank", "mixing"), ("basis", "spline")] {
        let out = run(&mut session, &format!("plot stems {old}"));
        let err = out.error.unwrap_or_else(|| panic!("`plot stems {old}` was accepted"));
        let message = err.to_string();
        assert!(message.contains(&format!("`plot stems {new}`")), "{old}: {message}");
        assert_eq!(err.line, Some(1), "{message}");
    }
    let out = run(&mut session, "plot stems scatter");
    let message = out.error.expect("an unknown word is refused").to_string();
    assert!(message.contains("unknown figure `scatter`") && message.contains("estimates|mixing"), "{message}");
}

/// The README's `plot` row and the demo notebooks' cells speak the new words.
#[test]
fn readme_and_demo_notebooks_use_no_old_figure_word() {
    let readme = std::fs::read_to_string(repo().join("README.md")).expect("README.md");
    let row = readme.lines().find(|l| l.starts_with("| `plot ")).expect("the statements table has a plot row");
    // the statement column (the second says which old words are refused)
    let row = row.split(" | ").next().expect("a column");
    for old in OLD_WORDS {
        assert!(!row.contains(old), "README plot row names {old}: {row}");
    }
    for new in ["estimates", "mixing", "spline"] {
        assert!(row.contains(new), "README plot row lacks {new}: {row}");
    }
    let demos = repo().join("demo-notebooks");
    let mut sources = vec![std::fs::read_to_string(demos.join("make_notebooks.py")).expect("generator")];
    for entry in std::fs::read_dir(&demos).expect("demo folder") {
        let path = entry.expect("entry").path();
        if path.extension().is_some_and(|e| e == "ipynb") {
            sources.push(std::fs::read_to_string(&path).expect("notebook"));
        }
    }
    assert!(sources.len() >= 4, "demo notebooks found: {}", sources.len() - 1);
    for text in &sources {
        for line in text.lines() {
            let words: Vec<&str> = line
                .split(|c: char| c.is_whitespace() || c == '"' || c == '\\')
                .filter(|w| !w.is_empty())
                .collect();
            if let Some(at) = words.iter().position(|w| *w == "plot") {
                if let Some(kind) = words.get(at + 2) {
                    assert!(!OLD_WORDS.contains(kind), "demo line uses an old figure word: {line}");
                }
            }
        }
    }
}

// ---------------------------------------------------------------- looks

/// Okabe & Ito (2008) colours (hex codes recalled), in an order of our own:
/// the order blue, orange, bluish green, vermillion — another plotting
/// library's colour-blind cycle — must not come back at the start.
#[test]
fn series_colours_do_not_start_in_the_old_order() {
    let first: Vec<&str> = (0..4).map(palette::series).collect();
    assert_ne!(first, [BLUE, ORANGE, BLUISH_GREEN, VERMILLION]);
    assert_ne!(first[..2], [BLUE, ORANGE]);
    let all: std::collections::BTreeSet<&str> = (0..7).map(palette::series).collect();
    assert_eq!(all.len(), 7, "seven distinct series colours before they cycle");
}

/// Open paths are drawn as a cased line (a colour band with a white line
/// inside), never in the old reddish purple, and the legend names the mark.
#[test]
fn open_paths_are_cased_lines_not_reddish_purple() {
    let node = |name: &str, role| NodeMark { name: name.into(), hidden: name == "soil", role };
    let picture = GraphPicture {
        title: "orchard_soil".into(),
        nodes: vec![
            node("rootstock", Role::Exposure),
            node("girth", Role::Adjusted),
            node("yield", Role::Outcome),
            node("soil", Role::Plain),
        ],
        edges: vec![
            EdgeMark { from: 0, to: 1, highlight: true },
            EdgeMark { from: 1, to: 2, highlight: false },
            EdgeMark { from: 0, to: 2, highlight: false },
            EdgeMark { from: 3, to: 1, highlight: true },
            EdgeMark { from: 3, to: 2, highlight: true },
        ],
    };
    let svg = graph_figure(&picture).expect("draws");
    assert!(!svg.contains(REDDISH_PURPLE), "the old open-path colour is back");
    let doc = roxmltree::Document::parse(&svg).expect("well-formed");
    let strokes: Vec<(String, f64)> = doc
        .descendants()
        .filter(|n| n.has_tag_name("path") && n.attribute("fill") == Some("none"))
        .map(|n| {
            let w = n.attribute("stroke-width").and_then(|w| w.parse().ok()).unwrap_or(0.0);
            (n.attribute("stroke").unwrap_or_default().to_string(), w)
        })
        .collect();
    let band = strokes.iter().find(|(c, _)| c == ORANGE).expect("an orange open-path band");
    let core = strokes.iter().find(|(c, _)| c == "#FFFFFF").expect("a white line inside the band");
    assert!(core.1 < band.1 / 2.0, "the white core {core:?} must be well inside the band {band:?}");
    assert!(svg.contains(">open path<"), "the legend names the open path");
}

// ---------------------------------------------------------------- README figures

/// The README shows the committed demo figures, each exists, is a figure
/// of the kind its name says, and keeps every text on its canvas when laid
/// out with DejaVu Sans.
#[test]
fn readme_shows_the_demo_figures_and_their_text_stays_on_the_canvas() {
    let readme = std::fs::read_to_string(repo().join("README.md")).expect("README.md");
    let shown: Vec<&str> = readme
        .match_indices("](demo-notebooks/figures/")
        .map(|(at, _)| {
            let rest = &readme[at + 2..];
            &rest[..rest.find(')').expect("a closed link")]
        })
        .collect();
    assert!(shown.len() >= 3, "README shows {} demo figures", shown.len());
    let opt = common::text_boxes::dejavu();
    for path in &shown {
        assert!(path.ends_with(".svg"), "{path}");
        let svg = std::fs::read_to_string(repo().join(path)).unwrap_or_else(|e| panic!("{path}: {e}"));
        assert!(svg.starts_with("<svg"), "{path} is not an SVG figure");
        let outside = common::text_boxes::texts_outside_canvas(&svg, &opt);
        assert!(outside.is_empty(), "{path}: {outside:#?}");
    }
    for (kind, file) in [("causal graph", "open-path.svg"), ("contrast", "contrast.svg")] {
        let svg = std::fs::read_to_string(repo().join("demo-notebooks/figures").join(file)).expect(file);
        assert!(svg.contains(&format!("<title>{kind}: ")), "{file} is not a {kind} figure");
    }
    let graph = std::fs::read_to_string(repo().join("demo-notebooks/figures/open-path.svg")).expect("graph");
    assert!(graph.contains(ORANGE), "the graph figure shows an open path");
}

// ---------------------------------------------------------------- predictive bands

/// The band of replicated quantiles against the large-sample law of a sample
/// quantile (Serfling 1980, *Approximation Theorems of Mathematical
/// Statistics*, §2.3.3; recalled): for n draws from a density f, the
/// p-quantile is about normal with mean F⁻¹(p) and sd √(p(1−p)) / (f(F⁻¹(p)) √n).
/// With 600 sets of 300 draws from N(20, 4²), the central 90% band at p is
/// F⁻¹(p) ± 1.645 sd; normal quantiles and density from statrs.
#[test]
fn replicated_quantile_bands_follow_the_sample_quantile_law() {
    let n = 300;
    let sets: Vec<Vec<f64>> = (0..600).map(|r| normals(5000 + r, n, 20.0, 4.0)).collect();
    let shares = [0.1, 0.5, 0.9];
    let bands = quantile_bands(&sets, &shares, 0.9);
    let population = NormalDist::new(20.0, 4.0).expect("normal");
    let z = NormalDist::new(0.0, 1.0).expect("standard normal").inverse_cdf(0.95);
    for (p, (lo, hi)) in shares.iter().zip(&bands) {
        let q = population.inverse_cdf(*p);
        let sd = (p * (1.0 - p)).sqrt() / (population.pdf(q) * (n as f64).sqrt());
        let (centre, half) = ((lo + hi) / 2.0, (hi - lo) / 2.0);
        assert!((centre - q).abs() < 0.25 * half, "p = {p}: band centre {centre:.3}, quantile {q:.3}");
        assert!((half / (z * sd) - 1.0).abs() < 0.15, "p = {p}: half-width {half:.3}, law {:.3}", z * sd);
    }
}

/// An observed sample from another distribution (sd twice the simulated)
/// leaves the band at most steps, and the figure says so in its sentence.
#[test]
fn predictive_check_says_where_the_observed_curve_leaves_the_band() {
    let sets: Vec<Vec<f64>> = (0..200).map(|r| normals(7000 + r, 300, 20.0, 4.0)).collect();
    let like = normals(1, 300, 20.0, 4.0);
    let wide = normals(2, 300, 20.0, 8.0);
    let outside = |svg: &str| -> usize {
        let at = svg.find("leaves the central 90% band at ").expect("the sentence says") + 31;
        svg[at..].split(' ').next().unwrap().parse().unwrap()
    };
    let q = Quantity::with_unit("yield", "kg");
    let fine = predictive_figure(PredictiveKind::Posterior, "m", &q, &like, &sets).expect("draws");
    let off = predictive_figure(PredictiveKind::Posterior, "m", &q, &wide, &sets).expect("draws");
    // a sample from the simulated distribution stays inside most of the time
    // (90% pointwise bands, so roughly a tenth of steps may fall outside)
    assert!(outside(&fine) < 35, "{}", outside(&fine));
    // with twice the sd, every quantile beyond ±0.1 of the median is off by
    // far more than the band's half-width
    assert!(outside(&off) > 60, "{}", outside(&off));
}

// ---------------------------------------------------------------- mixing tiles

/// Chains that sample one distribution share the pooled ranks at random, so
/// each tile's departure is a standardised hypergeometric count: over many
/// seeds its mean is near 0 and its variance near 1 (hypergeometric mean
/// and variance, e.g. Feller 1968, *An Introduction to Probability Theory*,
/// II.6; recalled).
#[test]
fn rank_departures_of_well_mixed_chains_are_standardised() {
    let (chains, per_chain) = (4, 800);
    let bins = rank_bins(per_chain);
    let mut all = Vec::new();
    for seed in 0..60 {
        let draws: Vec<f64> = (0..chains).flat_map(|c| normals(seed * 10 + c, per_chain, 3.0, 1.5)).collect();
        all.extend(rank_departures(&draws, chains as usize, bins).into_iter().flatten());
    }
    let n = all.len() as f64;
    let mean = all.iter().sum::<f64>() / n;
    let var = all.iter().map(|z| (z - mean).powi(2)).sum::<f64>() / (n - 1.0);
    assert!(mean.abs() < 0.05, "mean departure {mean}");
    assert!((var - 1.0).abs() < 0.1, "variance of departures {var}");
}

/// A chain stuck one sd above the others holds most of the top ranks: its
/// top tile departs by many standard errors and its bottom tile the other
/// way, and its row darkens in the figure while a well-mixed figure stays pale.
#[test]
fn a_chain_stuck_apart_darkens_its_row_of_tiles() {
    let per_chain = 800;
    let mut draws: Vec<f64> = (0..3).flat_map(|c| normals(90 + c, per_chain, 0.0, 1.0)).collect();
    draws.extend(normals(99, per_chain, 1.0, 1.0));
    let z = rank_departures(&draws, 4, rank_bins(per_chain));
    let last = z[3].len() - 1;
    assert!(z[3][last] > 8.0 && z[3][0] < -4.0, "stuck chain: {:?}", z[3]);
    let shaded = |svg: &str| -> f64 {
        let doc = roxmltree::Document::parse(svg).expect("well-formed");
        doc.descendants()
            .filter(|n| n.has_tag_name("rect") && n.attribute("fill-opacity").is_some())
            .filter(|n| n.parent_element().and_then(|p| p.attribute("class")) != Some("legend"))
            .map(|n| n.attribute("fill-opacity").unwrap().parse::<f64>().unwrap())
            .sum()
    };
    let mixed: Vec<f64> = (0..4).flat_map(|c| normals(190 + c, per_chain, 0.0, 1.0)).collect();
    let bad = mixing_figure("m", 4, &[ParameterDraws { name: "slope", draws: &draws }]).expect("draws");
    let good = mixing_figure("m", 4, &[ParameterDraws { name: "slope", draws: &mixed }]).expect("draws");
    assert!(shaded(&bad) > 3.0 * shaded(&good), "stuck {} vs mixed {}", shaded(&bad), shaded(&good));
    // chains differ in dash pattern as well as colour
    let doc = roxmltree::Document::parse(&good).expect("well-formed");
    let patterns: std::collections::BTreeSet<&str> = doc
        .descendants()
        .filter(|n| n.has_tag_name("path") && n.attribute("stroke-opacity").is_some())
        .map(|n| n.attribute("stroke-dasharray").unwrap_or("solid"))
        .collect();
    assert_eq!(patterns.len(), 4, "{patterns:?}");
}
