//! Posterior densities of parameters, and the density of one contrast split
//! at zero.
//!
//! The contrast figure shades a histogram with a bin edge at zero, so the
//! shaded area on each side is exactly the share of draws on that side;
//! a kernel density line is drawn over it for shape.

use super::canvas::{
    extent, fill_path, left_margin, legend, legend_height, legend_rows, line, polygon_d, rect,
    stroke_path, text, text_width, Anchor, Attr, Frame, Key, Sheet, HEADING, MEDIUM, SMALL, WIDTH,
};
use super::density::{kde, quantile, silverman_bandwidth, sorted_finite};
use super::palette::{series, INK, ORANGE, SKY_BLUE};
use super::{PlotError, Quantity};

/// Draws of one named parameter.
#[derive(Debug, Clone, Copy)]
pub struct ParameterDraws<'a> {
    /// Label, e.g. `"intercept[dwarf]"`.
    pub name: &'a str,
    /// All draws, chains concatenated.
    pub draws: &'a [f64],
}

/// How several densities share the figure.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum DensityArrangement {
    /// One panel per parameter, each with its own value axis: parameters on
    /// different scales stay readable.
    #[default]
    Stacked,
    /// All densities over one value axis, for parameters on a common scale.
    Shared,
}

const GRID: usize = 160;

/// Where a parameter's density is worth drawing: its central 99.8% widened
/// by two bandwidths.
fn density_window(sorted: &[f64]) -> (f64, f64) {
    let h = silverman_bandwidth(sorted);
    (
        quantile(sorted, 0.001) - 2.0 * h,
        quantile(sorted, 0.999) + 2.0 * h,
    )
}

/// Kernel density estimates (Silverman bandwidth) of several parameters'
/// posterior draws, one colour each, named in a legend.
pub fn posterior_figure(
    subject: &str,
    value: &Quantity,
    parameters: &[ParameterDraws],
    arrangement: DensityArrangement,
) -> Result<String, PlotError> {
    let mut curves = Vec::with_capacity(parameters.len());
    for p in parameters {
        let sorted = sorted_finite(p.draws);
        if sorted.is_empty() {
            return Err(PlotError::Empty {
                figure: "posterior",
                what: format!("parameter {}", p.name),
            });
        }
        let (lo, hi) = density_window(&sorted);
        curves.push((p.name, kde(&sorted, lo, hi, GRID)));
    }
    if curves.is_empty() {
        return Err(PlotError::Empty {
            figure: "posterior",
            what: "the list of parameters".into(),
        });
    }
    let desc = format!(
        "Posterior densities of {} from {} draws each, estimated with a Gaussian kernel.",
        parameters
            .iter()
            .map(|p| p.name)
            .collect::<Vec<_>>()
            .join(", "),
        parameters[0].draws.len()
    );
    let entries: Vec<(Key, String)> = curves
        .iter()
        .enumerate()
        .map(|(i, (name, _))| (Key::Swatch(series(i), 0.6), name.to_string()))
        .collect();
    match arrangement {
        DensityArrangement::Shared => {
            Ok(shared_densities(subject, value, &curves, &entries, &desc))
        }
        DensityArrangement::Stacked => {
            Ok(stacked_densities(subject, value, &curves, &entries, &desc))
        }
    }
}

type Curve<'a> = (&'a str, super::density::DensityCurve);

fn shared_densities(
    subject: &str,
    value: &Quantity,
    curves: &[Curve],
    entries: &[(Key, String)],
    desc: &str,
) -> String {
    let xs = extent(
        curves
            .iter()
            .flat_map(|(_, c)| [c.xs.first(), c.xs.last()])
            .flatten(),
    )
    .unwrap_or((0.0, 1.0));
    let top = extent(curves.iter().flat_map(|(_, c)| c.ys.iter())).map_or(1.0, |e| e.1);
    let rows = legend_rows(entries, WIDTH - 80.0);
    let y = (0.0, top * 1.08);
    let left = left_margin(y, true);
    let panel_top = HEADING + 8.0 + legend_height(rows) + 10.0;
    let height = panel_top + 240.0 + 52.0;
    let frame = Frame {
        left,
        top: panel_top,
        width: WIDTH - left - 20.0,
        height: 240.0,
        x: xs,
        y,
    };
    let mut sheet = Sheet::new(WIDTH, height, "posterior", subject, desc);
    legend(
        &mut sheet,
        left,
        HEADING + 8.0,
        WIDTH - left - 20.0,
        entries,
    );
    for (i, (_, c)) in curves.iter().enumerate() {
        draw_density(&mut sheet, &frame, c, series(i));
    }
    frame.x_axis(&mut sheet, Some(&value.label()));
    frame.y_axis(&mut sheet, Some("density"));
    sheet.finish()
}

const ROW: f64 = 92.0;
const ROW_PANEL: f64 = 56.0;

fn stacked_densities(
    subject: &str,
    value: &Quantity,
    curves: &[Curve],
    entries: &[(Key, String)],
    desc: &str,
) -> String {
    let label_width = entries
        .iter()
        .map(|(_, l)| text_width(l, MEDIUM))
        .fold(0.0, f64::max);
    let left = (label_width + 40.0).clamp(90.0, 260.0);
    let height = HEADING + 14.0 + ROW * curves.len() as f64 + 30.0;
    let mut sheet = Sheet::new(WIDTH, height, "posterior", subject, desc);
    for (i, (name, c)) in curves.iter().enumerate() {
        let top = HEADING + 14.0 + ROW * i as f64;
        let peak =
            c.ys.iter()
                .copied()
                .fold(0.0, f64::max)
                .max(f64::MIN_POSITIVE);
        let frame = Frame {
            left,
            top,
            width: WIDTH - left - 24.0,
            height: ROW_PANEL,
            x: (c.xs[0], c.xs[c.xs.len() - 1]),
            y: (0.0, peak * 1.05),
        };
        draw_density(&mut sheet, &frame, c, series(i));
        let mid = top + ROW_PANEL - 8.0;
        sheet.push(rect(8.0, mid - 6.0, 12.0, 12.0, series(i)).with("fill-opacity", "0.6"));
        sheet.push(text(26.0, mid + 4.5, name, MEDIUM, Anchor::Start));
        let last = i + 1 == curves.len();
        frame.x_axis(&mut sheet, last.then(|| value.label()).as_deref());
    }
    sheet.finish()
}

fn draw_density(
    sheet: &mut Sheet,
    frame: &Frame,
    c: &super::density::DensityCurve,
    colour: &'static str,
) {
    let (x0, x1) = (c.xs[0], c.xs[c.xs.len() - 1]);
    let outline =
        c.xs.iter()
            .zip(&c.ys)
            .map(|(x, y)| (frame.px(*x), frame.py(*y)));
    let area = std::iter::once((frame.px(x0), frame.py(0.0)))
        .chain(outline)
        .chain(std::iter::once((frame.px(x1), frame.py(0.0))));
    sheet.push(fill_path(polygon_d(area), colour, 0.22));
    sheet.push(stroke_path(frame.curve_d(&c.xs, &c.ys), colour, 2.0));
}

/// Histogram of draws with one bin edge exactly at zero.
struct SplitHistogram {
    edges: Vec<f64>,
    heights: Vec<f64>,
}

/// `sorted` holds the draws drawn; heights are densities of all `total`
/// draws, so the bars' area is the share of all draws they hold.
fn split_histogram(sorted: &[f64], total: usize) -> SplitHistogram {
    let (lo, hi) = (sorted[0], sorted[sorted.len() - 1]);
    let bins = ((sorted.len() as f64).sqrt().round() as usize).clamp(12, 48) as f64;
    let width = if hi > lo {
        (hi - lo) / bins
    } else {
        (lo.abs() * 0.05).max(0.05)
    };
    // bins are closed on the right, (e_k, e_k+1], so a draw of exactly zero
    // counts with the draws below zero, as the written share says
    let first = (lo / width).ceil() as i64 - 1;
    let last = ((hi / width).ceil() as i64).max(first + 1);
    let edges: Vec<f64> = (first..=last).map(|k| k as f64 * width).collect();
    let mut counts = vec![0usize; edges.len() - 1];
    for v in sorted {
        let k =
            (((v / width).ceil() as i64) - 1 - first).clamp(0, counts.len() as i64 - 1) as usize;
        counts[k] += 1;
    }
    let n = total as f64;
    let heights = counts.iter().map(|c| *c as f64 / (n * width)).collect();
    SplitHistogram { edges, heights }
}

/// Path data of the stepped outline of bins `range`, closed along zero density.
fn step_area(frame: &Frame, h: &SplitHistogram, range: std::ops::Range<usize>) -> String {
    if range.is_empty() {
        return String::new();
    }
    let base = frame.py(0.0);
    let mut points = vec![(frame.px(h.edges[range.start]), base)];
    for k in range.clone() {
        let y = frame.py(h.heights[k]);
        points.push((frame.px(h.edges[k]), y));
        points.push((frame.px(h.edges[k + 1]), y));
    }
    points.push((frame.px(h.edges[range.end]), base));
    polygon_d(points)
}

/// The central share of draws a contrast figure's axis spans when the tails
/// are long: the 0.25% and 99.75% quantiles.
const SHOWN_TAIL: f64 = 0.0025;

/// The draws a contrast figure draws, and how many lie beyond each end.
struct ShownDraws<'a> {
    shown: &'a [f64],
    below: usize,
    above: usize,
}

/// Keep every draw unless the whole span is more than 1.5 times the central
/// span (a heavy tail that would squash the bulk into a few pixels); then
/// keep the draws between the central quantiles.
fn shown_draws(sorted: &[f64]) -> ShownDraws<'_> {
    let whole = ShownDraws { shown: sorted, below: 0, above: 0 };
    let (lo, hi) = (quantile(sorted, SHOWN_TAIL), quantile(sorted, 1.0 - SHOWN_TAIL));
    let span = sorted[sorted.len() - 1] - sorted[0];
    if !(hi > lo) || span <= 1.5 * (hi - lo) {
        return whole;
    }
    let start = sorted.partition_point(|v| *v < lo);
    let end = sorted.partition_point(|v| *v <= hi);
    ShownDraws { shown: &sorted[start..end], below: start, above: sorted.len() - end }
}

/// The note under a trimmed axis, or `None` when every draw is drawn.
fn beyond_note(d: &ShownDraws) -> Option<String> {
    (d.below + d.above > 0).then(|| {
        format!(
            "not drawn: {} draws left of the axis, {} right of it (shares above use every draw)",
            d.below, d.above
        )
    })
}

/// Format a share as a percentage with no decimals, or one below 1%.
fn percent(share: f64) -> String {
    let p = share * 100.0;
    if p > 0.0 && p < 1.0 || p > 99.0 && p < 100.0 {
        format!("{p:.1}%")
    } else {
        format!("{p:.0}%")
    }
}

/// Posterior density of a contrast: the area below zero and the area above
/// zero shaded in two colours, each share of draws written beside it, and a
/// zero line.
pub fn contrast_figure(
    subject: &str,
    value: &Quantity,
    draws: &[f64],
) -> Result<String, PlotError> {
    let sorted = sorted_finite(draws);
    if sorted.is_empty() {
        return Err(PlotError::Empty {
            figure: "contrast",
            what: format!("the draws of {subject}"),
        });
    }
    let n = sorted.len() as f64;
    let above = sorted.iter().filter(|v| **v > 0.0).count() as f64 / n;
    let below = 1.0 - above;
    let shown = shown_draws(&sorted);
    let note = beyond_note(&shown);
    let hist = split_histogram(shown.shown, sorted.len());
    let step = hist.edges[1] - hist.edges[0];
    let (lo, hi) = (
        hist.edges[0].min(0.0) - step,
        hist.edges[hist.edges.len() - 1].max(0.0) + step,
    );
    let smooth = kde(&sorted, lo, hi, 200);
    let peak = hist
        .heights
        .iter()
        .chain(&smooth.ys)
        .copied()
        .fold(0.0, f64::max);
    let y = (0.0, peak * 1.3);
    let left = left_margin(y, true);
    let frame = Frame {
        left,
        top: HEADING + 12.0,
        width: WIDTH - left - 20.0,
        height: 300.0,
        x: (lo, hi),
        y,
    };
    let mean = sorted.iter().sum::<f64>() / n;
    let desc = format!(
        "Posterior density of the contrast {subject} from {} draws, mean {mean:.3}: {} of draws lie above zero (shaded blue) and {} at or below zero (shaded orange).{}",
        sorted.len(),
        percent(above),
        percent(below),
        note.as_ref().map(|n| format!(" The axis is cut to the central draws; {n}.")).unwrap_or_default()
    );
    let foot = if note.is_some() { 70.0 } else { 52.0 };
    let mut sheet = Sheet::new(WIDTH, frame.bottom() + foot, "contrast", subject, &desc);
    let split = hist
        .edges
        .iter()
        .position(|e| *e >= 0.0)
        .unwrap_or(hist.edges.len() - 1)
        .min(hist.heights.len());
    sheet.push(fill_path(step_area(&frame, &hist, 0..split), ORANGE, 1.0));
    sheet.push(fill_path(
        step_area(&frame, &hist, split..hist.heights.len()),
        SKY_BLUE,
        1.0,
    ));
    sheet.push(stroke_path(frame.curve_d(&smooth.xs, &smooth.ys), INK, 1.6));
    let zero = frame.px(0.0);
    sheet.push(line(zero, frame.top, zero, frame.bottom(), INK, 1.4));
    let row = frame.top + 18.0;
    let below_text = format!("at or below 0: {} of draws", percent(below));
    let above_text = format!("above 0: {} of draws", percent(above));
    sheet.push(rect(frame.left + 8.0, row - 10.0, 12.0, 12.0, ORANGE));
    sheet.push(text(
        frame.left + 25.0,
        row,
        &below_text,
        SMALL,
        Anchor::Start,
    ));
    let right = frame.right() - 8.0;
    sheet.push(rect(right - 12.0, row - 10.0, 12.0, 12.0, SKY_BLUE));
    sheet.push(text(right - 17.0, row, &above_text, SMALL, Anchor::End));
    frame.x_axis(&mut sheet, Some(&value.label()));
    frame.y_axis(&mut sheet, Some("density"));
    if let Some(n) = &note {
        sheet.push(text(frame.left, frame.bottom() + 62.0, n, SMALL, Anchor::Start));
    }
    Ok(sheet.finish())
}
