//! Figures that check a model or a graph rather than report an effect:
//! predictive checks, sampler traces with rank histograms, and the testable
//! implications of a graph against the data.

use super::canvas::{
    circle, extent, legend, legend_height, legend_rows, line, padded, rect, stroke_path, text,
    text_width, Anchor, Attr, Frame, Key, Sheet, HEADING, MEDIUM, SMALL, WIDTH,
};
use super::density::{kde, quantile, sorted_finite, thin_indices};
use super::palette::{series, BLUE, INK, SKY_BLUE, VERMILLION};
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

/// Parameter draws for a trace row; draws are stored chain after chain.
pub type TraceParameter<'a> = ParameterDraws<'a>;

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

const REPLICATES: usize = 40;
const REPLICATE_GRID: usize = 120;

/// Observed outcome density (thick) against densities of replicated data
/// sets (thin, translucent). `observed` may be empty for a prior check.
pub fn predictive_figure(
    kind: PredictiveKind,
    subject: &str,
    outcome: &Quantity,
    observed: &[f64],
    replicated: &[Vec<f64>],
) -> Result<String, PlotError> {
    let figure = kind.title();
    let observed = sorted_finite(observed);
    let chosen: Vec<Vec<f64>> = thin_indices(replicated.len(), REPLICATES)
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
    let pooled = sorted_finite(&chosen.concat());
    let mut lo = quantile(&pooled, 0.005);
    let mut hi = quantile(&pooled, 0.995);
    if let (Some(first), Some(last)) = (observed.first(), observed.last()) {
        lo = lo.min(*first);
        hi = hi.max(*last);
    }
    let (lo, hi) = padded(lo, hi, 0.05);
    let curves: Vec<_> = chosen
        .iter()
        .map(|r| kde(r, lo, hi, REPLICATE_GRID))
        .collect();
    let seen = (!observed.is_empty()).then(|| kde(&observed, lo, hi, 200));
    let peak = curves
        .iter()
        .flat_map(|c| c.ys.iter())
        .chain(seen.iter().flat_map(|c| c.ys.iter()));
    let peak = peak.copied().fold(0.0, f64::max).max(f64::MIN_POSITIVE);
    let mut entries = vec![(
        Key::Stroke(SKY_BLUE, 1.2, false),
        format!("{} replicated data sets", chosen.len()),
    )];
    if seen.is_some() {
        entries.insert(0, (Key::Stroke(INK, 2.6, false), "observed".to_string()));
    }
    let y = (0.0, peak * 1.08);
    let left = super::canvas::left_margin(y, true);
    let top = HEADING + 8.0 + legend_height(1) + 10.0;
    let frame = Frame {
        left,
        top,
        width: WIDTH - left - 20.0,
        height: 280.0,
        x: (lo, hi),
        y,
    };
    let desc = format!(
        "{}: densities of {} in {} replicated data sets{}.",
        figure,
        outcome.name,
        chosen.len(),
        if seen.is_some() {
            format!(" against the observed {} values", observed.len())
        } else {
            String::new()
        }
    );
    let mut sheet = Sheet::new(WIDTH, frame.bottom() + 52.0, figure, subject, &desc);
    legend(&mut sheet, left, HEADING + 8.0, frame.width, &entries);
    let lines: String = curves.iter().map(|c| frame.curve_d(&c.xs, &c.ys)).collect();
    sheet.push(stroke_path(lines, SKY_BLUE, 1.0).with("stroke-opacity", "0.5"));
    if let Some(c) = &seen {
        sheet.push(stroke_path(frame.curve_d(&c.xs, &c.ys), INK, 2.6));
    }
    frame.x_axis(&mut sheet, Some(&outcome.label()));
    frame.y_axis(&mut sheet, Some("density"));
    Ok(sheet.finish())
}

const TRACE_POINTS: usize = 400;
const RANK_BINS: usize = 20;
const TRACE_ROW: f64 = 150.0;
const TRACE_PANEL: f64 = 100.0;

/// Per parameter, a trace (draw index against value, one colour per chain)
/// and rank histograms per chain (ranks over all chains pooled), stacked.
pub fn trace_figure(
    subject: &str,
    chains: usize,
    parameters: &[TraceParameter],
) -> Result<String, PlotError> {
    let figure = "trace";
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
    let mut entries: Vec<(Key, String)> = (0..chains)
        .map(|c| {
            (
                Key::Stroke(series(c), 2.0, false),
                format!("chain {}", c + 1),
            )
        })
        .collect();
    entries.push((
        Key::Stroke(INK, 1.0, true),
        "even ranks (right)".to_string(),
    ));
    let rows = legend_rows(&entries, WIDTH - 40.0);
    let first_top = HEADING + 8.0 + legend_height(rows) + 8.0;
    let height = first_top + TRACE_ROW * parameters.len() as f64 + 24.0;
    let desc = format!(
        "Traces and rank histograms of {} over {chains} chains of {} draws each; well-mixed chains overlap in the traces and give flat rank histograms.",
        parameters.iter().map(|p| p.name).collect::<Vec<_>>().join(", "),
        parameters[0].draws.len() / chains
    );
    let mut sheet = Sheet::new(WIDTH, height, figure, subject, &desc);
    legend(&mut sheet, 20.0, HEADING + 8.0, WIDTH - 40.0, &entries);
    let left = parameters
        .iter()
        .map(|p| {
            let v = extent(p.draws).unwrap_or((0.0, 1.0));
            super::canvas::left_margin(padded(v.0, v.1, 0.04), false)
        })
        .fold(0.0, f64::max);
    for (i, p) in parameters.iter().enumerate() {
        trace_row(
            &mut sheet,
            first_top + TRACE_ROW * i as f64,
            left,
            chains,
            p,
        );
    }
    let bottom = first_top + TRACE_ROW * parameters.len() as f64 - TRACE_ROW + 22.0 + TRACE_PANEL;
    sheet.push(text(
        (left + 370.0) / 2.0,
        bottom + 36.0,
        "draw (per chain)",
        MEDIUM,
        Anchor::Middle,
    ));
    Ok(sheet.finish())
}

fn trace_row(sheet: &mut Sheet, top: f64, left: f64, chains: usize, p: &TraceParameter) {
    let per_chain = p.draws.len() / chains;
    let values = extent(p.draws).unwrap_or((0.0, 1.0));
    let y = padded(values.0, values.1, 0.04);
    sheet.push(text(left, top + 14.0, p.name, MEDIUM, Anchor::Start).with("font-weight", "bold"));
    let panel_top = top + 22.0;
    let trace = Frame {
        left,
        top: panel_top,
        width: 370.0 - left,
        height: TRACE_PANEL,
        x: (0.0, (per_chain.max(2) - 1) as f64),
        y,
    };
    let keep = thin_indices(per_chain, TRACE_POINTS);
    for c in 0..chains {
        let chain = &p.draws[c * per_chain..(c + 1) * per_chain];
        let pts = keep
            .iter()
            .map(|&i| (trace.px(i as f64), trace.py(chain[i])));
        sheet.push(
            stroke_path(super::canvas::polyline_d(pts), series(c), 0.8)
                .with("stroke-opacity", "0.8"),
        );
    }
    trace.x_axis(sheet, None);
    trace.y_axis(sheet, None);
    let counts = rank_counts(p.draws, chains, RANK_BINS);
    let expected = per_chain as f64 / RANK_BINS as f64;
    let tallest = counts
        .iter()
        .flatten()
        .copied()
        .fold(expected, |a, b| a.max(b as f64));
    let ranks = Frame {
        left: 420.0,
        top: panel_top,
        width: WIDTH - 420.0 - 16.0,
        height: TRACE_PANEL,
        x: (0.0, 1.0),
        y: (0.0, tallest * 1.1),
    };
    for (c, row) in counts.iter().enumerate() {
        let mut pts = Vec::with_capacity(2 * RANK_BINS);
        for (b, n) in row.iter().enumerate() {
            let yv = ranks.py(*n as f64);
            pts.push((ranks.px(b as f64 / RANK_BINS as f64), yv));
            pts.push((ranks.px((b + 1) as f64 / RANK_BINS as f64), yv));
        }
        sheet.push(stroke_path(super::canvas::polyline_d(pts), series(c), 1.4));
    }
    ranks.horizontal_reference(sheet, expected);
    sheet.push(line(
        ranks.left,
        ranks.bottom(),
        ranks.right(),
        ranks.bottom(),
        INK,
        0.8,
    ));
    sheet.push(text(
        ranks.left,
        top + 14.0,
        "rank histogram per chain",
        SMALL,
        Anchor::Start,
    ));
    sheet.push(text(
        ranks.left,
        ranks.bottom() + 17.0,
        "low",
        SMALL,
        Anchor::Start,
    ));
    sheet.push(text(
        ranks.right(),
        ranks.bottom() + 17.0,
        "high",
        SMALL,
        Anchor::End,
    ));
    sheet.push(text(
        (ranks.left + ranks.right()) / 2.0,
        ranks.bottom() + 17.0,
        "rank",
        SMALL,
        Anchor::Middle,
    ));
}

/// Counts per chain of pooled ranks falling in each of `bins` equal rank bins.
fn rank_counts(draws: &[f64], chains: usize, bins: usize) -> Vec<Vec<usize>> {
    let per_chain = draws.len() / chains;
    let mut order: Vec<usize> = (0..draws.len()).collect();
    order.sort_by(|a, b| draws[*a].total_cmp(&draws[*b]));
    let mut counts = vec![vec![0usize; bins]; chains];
    let total = draws.len();
    for (rank, &i) in order.iter().enumerate() {
        let bin = (rank * bins / total).min(bins - 1);
        counts[i / per_chain][bin] += 1;
    }
    counts
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
            &r.statement,
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
