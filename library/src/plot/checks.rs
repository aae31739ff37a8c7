//! Figures that check a model or a graph rather than report an effect:
//! predictive checks, the mixing of sampler chains, and the testable
//! implications of a graph against the data.
//!
//! Waypath's own looks: a predictive check shows the outcome's cumulative
//! shares as bands over the simulated sets with the observed rows as one
//! line (a figure that also says at how many steps the observed curve
//! leaves the band); the mixing figure puts each parameter's traces
//! across the page, chains told apart by dash pattern as well as colour,
//! over a strip of tiles that stays pale when the chains share the ranks
//! evenly.

use super::canvas::{
    circle, clip_to_width, extent, fill_path, legend, legend_height, legend_rows, line, num, padded,
    polygon_d, polyline_d, rect, stroke_path, text, text_width, Anchor, Attr, Frame, Key, Sheet,
    HEADING, MEDIUM, SMALL, WIDTH,
};
use super::density::{quantile, sorted_finite, thin_indices};
use super::palette::{series, BLUE, BLUISH_GREEN, INK, VERMILLION};
use super::posterior::ParameterDraws;
use super::{PlotError, Quantity};

/// Before or after seeing the data.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum PredictiveKind {
    /// Outcomes simulated from the prior alone.
    Prior,
    /// Outcomes simulated from the posterior.
    Posterior,
}

impl PredictiveKind {
    fn title(self) -> &'static str {
        match self {
            PredictiveKind::Prior => "prior predictive check",
            PredictiveKind::Posterior => "posterior predictive check",
        }
    }
}

/// One testable implication of a graph and its estimated association.
#[derive(Debug, Clone, PartialEq)]
pub struct ImplicationRow {
    /// The implied independence as written, e.g. `"soil ⊥ rootstock | girth"`.
    pub statement: String,
    /// Point estimate of the association.
    pub estimate: f64,
    /// Lower interval bound.
    pub lower: f64,
    /// Upper interval bound.
    pub upper: f64,
}

/// Replicated sets kept for the bands (thinned evenly beyond this).
const BAND_SETS: usize = 400;
/// Shares of rows at which the replicated quantiles are summarised.
const BAND_STEPS: usize = 100;
/// Points of the observed quantile curve.
const OBSERVED_STEPS: usize = 400;
/// The outer and inner bands: central shares of the replicated sets.
const OUTER: f64 = 0.9;
const INNER: f64 = 0.5;

/// At each share `p` of rows, the central `mass` range of the replicated
/// sets' `p`-quantiles: `(lower, upper)` per entry of `shares`.
///
/// Each set's quantile is the linear interpolation of Hyndman & Fan (1996,
/// definition 7); the range across sets is taken the same way. Sets with no
/// finite value are skipped; with none left the result is empty.
pub fn quantile_bands(replicated: &[Vec<f64>], shares: &[f64], mass: f64) -> Vec<(f64, f64)> {
    let sets: Vec<Vec<f64>> = replicated
        .iter()
        .map(|r| sorted_finite(r))
        .filter(|r| !r.is_empty())
        .collect();
    if sets.is_empty() {
        return Vec::new();
    }
    let tail = (1.0 - mass.clamp(0.0, 1.0)) / 2.0;
    shares
        .iter()
        .map(|&p| {
            let mut at: Vec<f64> = sets.iter().map(|r| quantile(r, p)).collect();
            at.sort_by(f64::total_cmp);
            (quantile(&at, tail), quantile(&at, 1.0 - tail))
        })
        .collect()
}

/// The outcome's distribution as the share of rows at or below each value:
/// the observed rows as a line against bands (the central 90% and 50%) of
/// the same curve over the replicated outcome sets. `observed` may be empty
/// for a prior check.
pub fn predictive_figure(
    kind: PredictiveKind,
    subject: &str,
    outcome: &Quantity,
    observed: &[f64],
    replicated: &[Vec<f64>],
) -> Result<String, PlotError> {
    predictive_figure_with_cut(kind, subject, outcome, observed, &[], replicated)
}

/// [`predictive_figure`] for times some of which were cut short: `cut` holds
/// the observed values of those rows (also in `observed`), each marked on
/// the observed curve by an open ring — a value the event came after, not
/// when it came. The simulated sets are to be cut the same way by the
/// caller.
pub fn predictive_figure_with_cut(
    kind: PredictiveKind,
    subject: &str,
    outcome: &Quantity,
    observed: &[f64],
    cut: &[f64],
    replicated: &[Vec<f64>],
) -> Result<String, PlotError> {
    let figure = kind.title();
    let observed = sorted_finite(observed);
    let chosen: Vec<Vec<f64>> = thin_indices(replicated.len(), BAND_SETS)
        .into_iter()
        .map(|i| sorted_finite(&replicated[i]))
        .filter(|r| !r.is_empty())
        .collect();
    if chosen.is_empty() {
        return Err(PlotError::Empty {
            figure,
            what: "the replicated data sets".into(),
        });
    }
    let shares: Vec<f64> = (0..=BAND_STEPS)
        .map(|k| k as f64 / BAND_STEPS as f64)
        .collect();
    let outer = quantile_bands(&chosen, &shares, OUTER);
    let inner = quantile_bands(&chosen, &shares, INNER);
    let middle = quantile_bands(&chosen, &shares, 0.0);
    let seen: Vec<(f64, f64)> = (0..=OBSERVED_STEPS)
        .map(|k| {
            let p = k as f64 / OBSERVED_STEPS as f64;
            (quantile(&observed, p), p)
        })
        .filter(|(x, _)| x.is_finite())
        .collect();
    let inner_shares = &shares[1..BAND_STEPS];
    let outside = if observed.is_empty() {
        0
    } else {
        inner_shares
            .iter()
            .zip(&outer[1..BAND_STEPS])
            .filter(|(p, (lo, hi))| {
                let q = quantile(&observed, **p);
                q < *lo || q > *hi
            })
            .count()
    };
    let xs = extent(
        outer
            .iter()
            .flat_map(|(a, b)| [a, b])
            .chain(seen.iter().map(|(x, _)| x)),
    )
    .unwrap_or((0.0, 1.0));
    let (lo, hi) = padded(xs.0, xs.1, 0.04);
    let mut entries = vec![
        (
            Key::Swatch(BLUISH_GREEN, 0.22),
            format!("central {} of {} simulated sets", percent(OUTER), chosen.len()),
        ),
        (
            Key::Swatch(BLUISH_GREEN, 0.5),
            format!("central {}", percent(INNER)),
        ),
    ];
    if !observed.is_empty() {
        entries.push((Key::Stroke(INK, 2.0, false), "observed rows".to_string()));
    }
    if !cut.is_empty() {
        entries.push((Key::Dot(VERMILLION, false), format!("{} rows cut short: the event came later", cut.len())));
    }
    let rows = legend_rows(&entries, WIDTH - 40.0);
    let y = (0.0, 1.0);
    let left = super::canvas::left_margin(y, true);
    let top = HEADING + 8.0 + legend_height(rows) + 10.0;
    let frame = Frame {
        left,
        top,
        width: WIDTH - left - 20.0,
        height: 280.0,
        x: (lo, hi),
        y,
    };
    let verdict = if observed.is_empty() {
        String::new()
    } else {
        format!(
            "; the observed curve leaves the central {} band at {outside} of {} inner steps",
            percent(OUTER),
            inner_shares.len()
        )
    };
    let desc = format!(
        "{}: the share of rows at or below each value of {}, as bands over {} simulated outcome sets{}{verdict}.",
        figure,
        outcome.name,
        chosen.len(),
        if observed.is_empty() {
            String::new()
        } else {
            format!(" against the {} observed values", observed.len())
        }
    );
    let mut sheet = Sheet::new(WIDTH, frame.bottom() + 52.0, figure, subject, &desc);
    legend(&mut sheet, 20.0, HEADING + 8.0, WIDTH - 40.0, &entries);
    sheet.push(fill_path(sideways_band(&frame, &shares, &outer), BLUISH_GREEN, 0.22));
    sheet.push(fill_path(sideways_band(&frame, &shares, &inner), BLUISH_GREEN, 0.5));
    let mid = polyline_d(middle.iter().zip(&shares).map(|((x, _), p)| (frame.px(*x), frame.py(*p))));
    sheet.push(stroke_path(mid, BLUISH_GREEN, 1.2).with("stroke-dasharray", "1.5 2.5"));
    if !seen.is_empty() {
        let line = polyline_d(seen.iter().map(|(x, p)| (frame.px(*x), frame.py(*p))));
        sheet.push(stroke_path(line, INK, 2.0));
        for &x in cut.iter().filter(|x| x.is_finite()) {
            let share = observed.partition_point(|&v| v <= x) as f64 / observed.len() as f64;
            let ring = circle(frame.px(x), frame.py(share), 3.0, "#FFFFFF");
            sheet.push(ring.with("stroke", VERMILLION).with("stroke-width", "1.2"));
        }
        // each step lies outside a pointwise band with chance 1 − OUTER when
        // the model fits; neighbouring steps move together, so counts vary
        let expected = ((1.0 - OUTER) * inner_shares.len() as f64).round();
        let lines = [
            format!("{outside} of {} steps outside the {} band", inner_shares.len(), percent(OUTER)),
            format!("(about {expected} if the data came from the model)"),
        ];
        // the top left of a cumulative-share panel stays empty: no curve
        // reaches a high share at the lowest values
        for (k, note) in lines.iter().enumerate() {
            let y = frame.top + 16.0 + 16.0 * k as f64;
            sheet.push(text(frame.left + 8.0, y, note, SMALL, Anchor::Start));
        }
    }
    frame.x_axis(&mut sheet, Some(&outcome.label()));
    frame.y_axis(&mut sheet, Some("share of rows at or below"));
    Ok(sheet.finish())
}

/// A share such as 0.9 written as "90%".
fn percent(share: f64) -> String {
    format!("{}%", (share * 100.0).round())
}

/// Path data of a band that runs up the page: at each share `p` (a height)
/// it spans the values `(lower, upper)` across.
fn sideways_band(frame: &Frame, shares: &[f64], band: &[(f64, f64)]) -> String {
    let left = shares
        .iter()
        .zip(band)
        .map(|(p, (lo, _))| (frame.px(*lo), frame.py(*p)));
    let right = shares
        .iter()
        .zip(band)
        .rev()
        .map(|(p, (_, hi))| (frame.px(*hi), frame.py(*p)));
    polygon_d(left.chain(right))
}

/// Draws shown per chain in a trace, at most.
const TRACE_POINTS: usize = 400;
const NAME_ROW: f64 = 20.0;
const TRACE_PANEL: f64 = 72.0;
const TILE_ROW: f64 = 10.0;
/// Departure from even, in standard errors, at which a tile is fully shaded.
const FULL_SHADE: f64 = 4.0;
/// Departures up to this many standard errors leave a tile white: the
/// everyday scatter of well-mixed chains (whose draws are autocorrelated,
/// so their counts vary somewhat more than independent draws would).
const NO_SHADE: f64 = 1.0;

/// The dash pattern of the `c`-th chain (solid, dashed, dotted, dash-dot),
/// so that chains stay apart without colour.
pub fn chain_dashes(c: usize) -> &'static str {
    const DASHES: [&str; 4] = ["", "7 3", "1.5 2.5", "9 3 2 3"];
    DASHES[c % DASHES.len()]
}

/// How many rank bins the mixing tiles use for `per_chain` draws per chain:
/// about 50 draws of a chain expected per tile, between 4 and 16 tiles.
pub fn rank_bins(per_chain: usize) -> usize {
    (per_chain / 50).clamp(4, 16)
}

/// For each chain and each of `bins` equal bins of the ranks pooled over
/// all chains: how far the chain's count in the bin departs from what
/// well-mixed chains give, in standard errors.
///
/// When the chains are draws from one distribution, the ranks are spread
/// over the chains at random, so a chain's count in a bin of `K` ranks out
/// of `N` follows the hypergeometric law of `S` draws without replacement
/// (`S` draws per chain): mean `S·K/N`, variance
/// `S·(K/N)·(1 − K/N)·(N − S)/(N − 1)`. With one chain there is nothing to
/// compare and every departure is zero.
pub fn rank_departures(draws: &[f64], chains: usize, bins: usize) -> Vec<Vec<f64>> {
    let total = draws.len();
    if chains == 0 || bins == 0 || total == 0 {
        return Vec::new();
    }
    let per_chain = total / chains;
    let mut order: Vec<usize> = (0..total).collect();
    order.sort_by(|a, b| draws[*a].total_cmp(&draws[*b]));
    let mut counts = vec![vec![0usize; bins]; chains];
    let mut sizes = vec![0usize; bins];
    for (rank, &i) in order.iter().enumerate() {
        let bin = (rank * bins / total).min(bins - 1);
        counts[(i / per_chain).min(chains - 1)][bin] += 1;
        sizes[bin] += 1;
    }
    let (n, s) = (total as f64, per_chain as f64);
    counts
        .iter()
        .map(|row| {
            row.iter()
                .zip(&sizes)
                .map(|(&count, &size)| {
                    let share = size as f64 / n;
                    let var = s * share * (1.0 - share) * (n - s) / (n - 1.0).max(1.0);
                    if var > 0.0 {
                        (count as f64 - s * share) / var.sqrt()
                    } else {
                        0.0
                    }
                })
                .collect()
        })
        .collect()
}

/// Per parameter: the chains' traces (one colour and one dash pattern per
/// chain) across the page, and under them a strip of tiles, one row per
/// chain and one column per bin of the pooled ranks, shaded by how far the
/// chain's share of the bin departs from even (vermillion: more draws than
/// even, blue: fewer). Well-mixed chains leave the strip pale.
pub fn mixing_figure(
    subject: &str,
    chains: usize,
    parameters: &[ParameterDraws],
) -> Result<String, PlotError> {
    let figure = "mixing";
    if parameters.is_empty() || chains == 0 {
        return Err(PlotError::Empty {
            figure,
            what: "the list of parameters".into(),
        });
    }
    for p in parameters {
        if p.draws.is_empty() || p.draws.len() % chains != 0 {
            let expected = (p.draws.len() / chains).max(1) * chains;
            let what = format!("parameter {}", p.name);
            return Err(PlotError::Length {
                figure,
                what,
                found: p.draws.len(),
                expected,
                per: "draw of every chain",
            });
        }
    }
    let per_chain = parameters[0].draws.len() / chains;
    let bins = rank_bins(per_chain);
    let mut entries: Vec<(Key, String)> = (0..chains)
        .map(|c| {
            (
                Key::Pattern(series(c), 2.0, chain_dashes(c)),
                format!("chain {}", c + 1),
            )
        })
        .collect();
    entries.push((Key::Swatch(VERMILLION, 0.8), "more draws than even".to_string()));
    entries.push((Key::Swatch(BLUE, 0.8), "fewer than even".to_string()));
    let rows = legend_rows(&entries, WIDTH - 40.0);
    let first_top = HEADING + 8.0 + legend_height(rows) + 6.0;
    let block = NAME_ROW + TRACE_PANEL + 24.0 + TILE_ROW * chains as f64 + 34.0;
    let height = first_top + block * parameters.len() as f64 + 4.0;
    let desc = format!(
        "Mixing of {} over {chains} chains of {per_chain} draws each: traces, and tiles of each chain's share of {bins} bins of the pooled ranks, shaded by its departure from even (white within {NO_SHADE} standard error, full shade at {FULL_SHADE}); well-mixed chains overlap in the traces and leave the tiles pale.",
        parameters.iter().map(|p| p.name).collect::<Vec<_>>().join(", "),
    );
    let mut sheet = Sheet::new(WIDTH, height, figure, subject, &desc);
    legend(&mut sheet, 20.0, HEADING + 8.0, WIDTH - 40.0, &entries);
    let left = parameters
        .iter()
        .map(|p| {
            let v = extent(p.draws).unwrap_or((0.0, 1.0));
            super::canvas::left_margin(padded(v.0, v.1, 0.04), false)
        })
        .fold(KEY_SAMPLE + 12.0, f64::max);
    for (i, p) in parameters.iter().enumerate() {
        mixing_block(&mut sheet, first_top + block * i as f64, left, chains, bins, p);
    }
    Ok(sheet.finish())
}

/// The note over each trace panel that says what its x-axis counts.
const DRAW_NOTE: &str = "draw (per chain) →";

/// Length of the line-style sample drawn left of each chain's tile row.
const KEY_SAMPLE: f64 = 30.0;

fn mixing_block(
    sheet: &mut Sheet,
    top: f64,
    left: f64,
    chains: usize,
    bins: usize,
    p: &ParameterDraws,
) {
    let per_chain = p.draws.len() / chains;
    let values = extent(p.draws).unwrap_or((0.0, 1.0));
    let width = WIDTH - left - 20.0;
    // the name (bold, so estimated a tenth wider) stops short of the note on the right
    let room = width - text_width(DRAW_NOTE, SMALL) - 16.0;
    let name = clip_to_width(p.name, MEDIUM * 1.1, room);
    sheet.push(text(left, top + 14.0, &name, MEDIUM, Anchor::Start).with("font-weight", "bold"));
    let trace = Frame {
        left,
        top: top + NAME_ROW,
        width,
        height: TRACE_PANEL,
        x: (0.0, (per_chain.max(2) - 1) as f64),
        y: padded(values.0, values.1, 0.04),
    };
    let keep = thin_indices(per_chain, TRACE_POINTS);
    for c in 0..chains {
        let chain = &p.draws[c * per_chain..(c + 1) * per_chain];
        let pts = keep
            .iter()
            .map(|&i| (trace.px(i as f64), trace.py(chain[i])));
        let mut path = stroke_path(polyline_d(pts), series(c), 1.0).with("stroke-opacity", "0.85");
        if !chain_dashes(c).is_empty() {
            path = path.with("stroke-dasharray", chain_dashes(c));
        }
        sheet.push(path);
    }
    trace.x_axis(sheet, None);
    trace.y_axis(sheet, None);
    sheet.push(text(trace.right(), top + 14.0, DRAW_NOTE, SMALL, Anchor::End));

    let strip_top = trace.bottom() + 24.0;
    let tile = width / bins as f64;
    let departures = rank_departures(p.draws, chains, bins);
    for (c, row) in departures.iter().enumerate() {
        let y = strip_top + TILE_ROW * c as f64;
        let sample = line(left - KEY_SAMPLE - 6.0, y + TILE_ROW / 2.0, left - 6.0, y + TILE_ROW / 2.0, series(c), 2.0);
        sheet.push(if chain_dashes(c).is_empty() {
            sample
        } else {
            sample.with("stroke-dasharray", chain_dashes(c))
        });
        for (b, z) in row.iter().enumerate() {
            let shade = ((z.abs() - NO_SHADE) / (FULL_SHADE - NO_SHADE)).clamp(0.0, 1.0) * 0.85;
            if shade < 0.02 {
                continue;
            }
            let colour = if *z > 0.0 { VERMILLION } else { BLUE };
            sheet.push(
                rect(left + tile * b as f64, y, tile, TILE_ROW, colour)
                    .with("fill-opacity", format!("{shade:.2}")),
            );
        }
    }
    let strip_height = TILE_ROW * chains as f64;
    let grid: String = (1..bins)
        .map(|b| format!("M{},{}v{}", num(left + tile * b as f64), num(strip_top), num(strip_height)))
        .chain((1..chains).map(|c| format!("M{},{}h{}", num(left), num(strip_top + TILE_ROW * c as f64), num(width))))
        .collect();
    sheet.push(stroke_path(grid, "#FFFFFF", 1.0));
    sheet.push(
        rect(left, strip_top, width, strip_height, "none")
            .with("stroke", INK)
            .with("stroke-width", "0.8"),
    );
    let below = strip_top + strip_height + 15.0;
    sheet.push(text(left, below, "lowest ranks", SMALL, Anchor::Start));
    sheet.push(text(left + width / 2.0, below, &format!("pooled ranks in {bins} bins"), SMALL, Anchor::Middle));
    sheet.push(text(left + width, below, "highest", SMALL, Anchor::End));
}

const IMPLICATION_ROW: f64 = 28.0;

/// Each implied independence as a row with its estimated association (point
/// and interval) against a zero line; rows whose interval excludes zero are
/// drawn filled in vermillion on a tinted band.
pub fn implications_figure(
    subject: &str,
    association: &Quantity,
    interval: &str,
    rows: &[ImplicationRow],
) -> Result<String, PlotError> {
    if rows.is_empty() {
        return Err(PlotError::Empty {
            figure: "testable implications",
            what: "the list of implications".into(),
        });
    }
    let label_width = rows
        .iter()
        .map(|r| text_width(&r.statement, MEDIUM))
        .fold(0.0, f64::max);
    let left = (label_width + 28.0).min(WIDTH * 0.55);
    let xs = extent(
        rows.iter()
            .flat_map(|r| [&r.lower, &r.upper, &r.estimate])
            .chain(&[0.0]),
    )
    .unwrap_or((-1.0, 1.0));
    let entries = vec![
        (Key::Dot(BLUE, false), format!("{interval} covers 0")),
        (Key::Dot(VERMILLION, true), format!("{interval} excludes 0")),
    ];
    let top = HEADING + 8.0 + legend_height(1) + 10.0;
    let height_panel = IMPLICATION_ROW * rows.len() as f64;
    let frame = Frame {
        left,
        top,
        width: WIDTH - left - 20.0,
        height: height_panel,
        x: padded(xs.0, xs.1, 0.06),
        y: (0.0, rows.len() as f64),
    };
    let flagged = rows
        .iter()
        .filter(|r| r.lower > 0.0 || r.upper < 0.0)
        .count();
    let desc = format!(
        "Testable implications of {subject}: {} implied independences with their estimated {} and {interval}; {flagged} of them exclude zero.",
        rows.len(),
        association.name
    );
    let mut sheet = Sheet::new(
        WIDTH,
        frame.bottom() + 52.0,
        "testable implications",
        subject,
        &desc,
    );
    legend(&mut sheet, left, HEADING + 8.0, frame.width, &entries);
    for (i, r) in rows.iter().enumerate() {
        let mid = frame.top + IMPLICATION_ROW * (i as f64 + 0.5);
        let excludes = r.lower > 0.0 || r.upper < 0.0;
        if excludes {
            sheet.push(
                rect(
                    8.0,
                    mid - IMPLICATION_ROW / 2.0 + 1.0,
                    frame.right() - 8.0,
                    IMPLICATION_ROW - 2.0,
                    VERMILLION,
                )
                .with("fill-opacity", "0.1"),
            );
        }
        sheet.push(text(
            left - 12.0,
            mid + 4.5,
            &clip_to_width(&r.statement, MEDIUM, left - 20.0),
            MEDIUM,
            Anchor::End,
        ));
    }
    frame.vertical_reference(&mut sheet, 0.0);
    for (i, r) in rows.iter().enumerate() {
        let mid = frame.top + IMPLICATION_ROW * (i as f64 + 0.5);
        let excludes = r.lower > 0.0 || r.upper < 0.0;
        let colour = if excludes { VERMILLION } else { BLUE };
        sheet.push(line(
            frame.px(r.lower),
            mid,
            frame.px(r.upper),
            mid,
            colour,
            2.2,
        ));
        let dot = circle(
            frame.px(r.estimate),
            mid,
            4.5,
            if excludes { VERMILLION } else { "#FFFFFF" },
        );
        sheet.push(dot.with("stroke", colour).with("stroke-width", "1.8"));
    }
    frame.x_axis(&mut sheet, Some(&association.label()));
    Ok(sheet.finish())
}

/// One level of a category outcome in a predictive check: the number of
/// observed rows at it and that number in each simulated set.
#[derive(Debug, Clone, PartialEq)]
pub struct LevelCount {
    pub level: String,
    pub observed: f64,
    pub replicated: Vec<f64>,
}

/// A predictive check of a category outcome: each level a row, the central
/// 90% and 50% of its row count over the simulated sets as a pale and a
/// darker band, and the observed count as a dot — hollow inside the outer
/// band, filled vermillion on a tinted row outside it.
pub fn level_count_figure(kind: PredictiveKind, subject: &str, outcome: &str, levels: &[LevelCount]) -> Result<String, PlotError> {
    let figure = kind.title();
    if levels.is_empty() || levels.iter().any(|l| sorted_finite(&l.replicated).is_empty()) {
        return Err(PlotError::Empty { figure, what: "the levels' simulated counts".into() });
    }
    let band = |l: &LevelCount, mass: f64| {
        let sorted = sorted_finite(&l.replicated);
        let tail = (1.0 - mass) / 2.0;
        (quantile(&sorted, tail), quantile(&sorted, 1.0 - tail))
    };
    let label_width = levels.iter().map(|l| text_width(&l.level, MEDIUM)).fold(0.0, f64::max);
    let left = (label_width + 28.0).min(WIDTH * 0.55);
    let xs = extent(levels.iter().flat_map(|l| {
        let (lo, hi) = band(l, OUTER);
        [lo, hi, l.observed]
    }).collect::<Vec<f64>>().iter())
    .unwrap_or((0.0, 1.0));
    let outer = format!("{}% of simulated sets", (OUTER * 100.0).round());
    let inner = format!("{}%", (INNER * 100.0).round());
    let entries = vec![
        (Key::Swatch(BLUE, 0.2), outer.clone()),
        (Key::Swatch(BLUE, 0.45), inner),
        (Key::Dot(INK, false), "observed rows".to_string()),
    ];
    let width = WIDTH - left - 20.0;
    let rows = legend_rows(&entries, width);
    let top = HEADING + 8.0 + legend_height(rows) + 10.0;
    let frame = Frame {
        left,
        top,
        width,
        height: IMPLICATION_ROW * levels.len() as f64,
        x: padded(xs.0.min(0.0), xs.1, 0.06),
        y: (0.0, levels.len() as f64),
    };
    let outside = levels.iter().filter(|l| {
        let (lo, hi) = band(l, OUTER);
        l.observed < lo || l.observed > hi
    }).count();
    let desc = format!(
        "{figure} of {subject}: the rows at each of {} levels of {outcome} against the {outer}; {outside} observed counts fall outside.",
        levels.len()
    );
    let mut sheet = Sheet::new(WIDTH, frame.bottom() + 52.0, figure, subject, &desc);
    legend(&mut sheet, left, HEADING + 8.0, width, &entries);
    for (i, l) in levels.iter().enumerate() {
        let mid = frame.top + IMPLICATION_ROW * (i as f64 + 0.5);
        let (lo, hi) = band(l, OUTER);
        let (inner_lo, inner_hi) = band(l, INNER);
        let missed = l.observed < lo || l.observed > hi;
        if missed {
            sheet.push(rect(8.0, mid - IMPLICATION_ROW / 2.0 + 1.0, frame.right() - 8.0, IMPLICATION_ROW - 2.0, VERMILLION).with("fill-opacity", "0.1"));
        }
        sheet.push(text(left - 12.0, mid + 4.5, &clip_to_width(&l.level, MEDIUM, left - 20.0), MEDIUM, Anchor::End));
        sheet.push(rect(frame.px(lo), mid - 7.0, (frame.px(hi) - frame.px(lo)).max(1.0), 14.0, BLUE).with("fill-opacity", "0.2"));
        sheet.push(rect(frame.px(inner_lo), mid - 7.0, (frame.px(inner_hi) - frame.px(inner_lo)).max(1.0), 14.0, BLUE).with("fill-opacity", "0.45"));
        let colour = if missed { VERMILLION } else { INK };
        let dot = circle(frame.px(l.observed), mid, 4.5, if missed { VERMILLION } else { "#FFFFFF" });
        sheet.push(dot.with("stroke", colour).with("stroke-width", "1.8"));
    }
    frame.x_axis(&mut sheet, Some(&format!("rows at the level, of {outcome}")));
    Ok(sheet.finish())
}
