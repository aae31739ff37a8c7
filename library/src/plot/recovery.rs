//! Figures for checks on synthetic data: posterior intervals beside the true
//! values that generated the data, and a calibration rank histogram with the
//! band a uniform histogram would fall in.

use statrs::distribution::{Binomial, DiscreteCDF};

use super::canvas::{
    circle, clip_to_width, diamond, extent, fill_path, left_margin, legend, legend_height, legend_rows, line, padded,
    polygon_d, polyline_d, rect, stroke_path, text, text_width, Anchor, Attr, Frame, Key, Sheet,
    HEADING, MEDIUM, WIDTH,
};
use super::palette::{BLUE, INK, SKY_BLUE, VERMILLION};
use super::{PlotError, Quantity};

/// One parameter of a recovery check.
#[derive(Debug, Clone, PartialEq)]
pub struct RecoveryRow {
    /// Parameter label.
    pub name: String,
    /// The value the synthetic data were generated with.
    pub truth: f64,
    /// Posterior mean.
    pub estimate: f64,
    /// Lower interval bound.
    pub lower: f64,
    /// Upper interval bound.
    pub upper: f64,
}

/// Height of one parameter's row: its interval, mean and truth, then its
/// own axis with tick labels below.
const ROW: f64 = 50.0;

/// Posterior intervals per parameter with the true values beside them as
/// diamonds; rows whose interval misses the truth get a tinted band. Each
/// parameter gets its own axis, scaled to its interval and truth, so that an
/// intercept near 30 does not squeeze a slope's interval of width 0.05 into
/// a dot.
pub fn recovery_figure(
    subject: &str,
    value: &Quantity,
    interval: &str,
    rows: &[RecoveryRow],
) -> Result<String, PlotError> {
    if rows.is_empty() {
        return Err(PlotError::Empty {
            figure: "recovery",
            what: "the list of parameters".into(),
        });
    }
    let label_width = rows
        .iter()
        .map(|r| text_width(&r.name, MEDIUM))
        .fold(0.0, f64::max);
    let left = (label_width + 28.0).min(WIDTH * 0.4);
    let entries = vec![
        (
            Key::Stroke(BLUE, 2.4, false),
            format!("posterior {interval}"),
        ),
        (Key::Dot(BLUE, true), "posterior mean".to_string()),
        (Key::Diamond(VERMILLION), "true value".to_string()),
        (
            Key::Swatch(VERMILLION, 0.2),
            "interval misses it".to_string(),
        ),
    ];
    let width = WIDTH - left - 28.0;
    let top = HEADING + 8.0 + legend_height(legend_rows(&entries, width)) + 10.0;
    let missed = rows
        .iter()
        .filter(|r| r.truth < r.lower || r.truth > r.upper)
        .count();
    let desc = format!(
        "Recovery check {subject}: posterior {interval} of {} parameters ({}) beside the true values, each on its own scale; {missed} intervals miss the true value.",
        rows.len(),
        rows.iter().map(|r| r.name.as_str()).collect::<Vec<_>>().join(", ")
    );
    let bottom = top + ROW * rows.len() as f64;
    let mut sheet = Sheet::new(WIDTH, bottom + 34.0, "recovery", subject, &desc);
    legend(&mut sheet, left, HEADING + 8.0, width, &entries);
    for (i, r) in rows.iter().enumerate() {
        let row_top = top + ROW * i as f64;
        let mid = row_top + 14.0;
        let xs = extent([&r.lower, &r.upper, &r.truth, &r.estimate]).unwrap_or((0.0, 1.0));
        let frame = Frame {
            left,
            top: row_top,
            width,
            height: 28.0,
            x: padded(xs.0, xs.1, 0.08),
            y: (0.0, 1.0),
        };
        if r.truth < r.lower || r.truth > r.upper {
            let band = rect(8.0, row_top + 1.0, frame.right() - 8.0, ROW - 2.0, VERMILLION);
            sheet.push(band.with("fill-opacity", "0.1"));
        }
        let label = clip_to_width(&r.name, MEDIUM, left - 20.0);
        sheet.push(text(left - 12.0, mid + 4.5, &label, MEDIUM, Anchor::End));
        sheet.push(line(frame.px(r.lower), mid - 3.0, frame.px(r.upper), mid - 3.0, BLUE, 2.4));
        sheet.push(circle(frame.px(r.estimate), mid - 3.0, 4.0, BLUE));
        sheet.push(diamond(frame.px(r.truth), mid + 5.0, 5.5, VERMILLION));
        frame.x_axis(&mut sheet, None);
    }
    let caption = clip_to_width(&format!("{}, each parameter on its own scale", value.label()), MEDIUM, WIDTH - 24.0);
    sheet.push(text(WIDTH / 2.0, bottom + 22.0, &caption, MEDIUM, Anchor::Middle));
    Ok(sheet.finish())
}

/// Share of a uniform histogram's counts expected in the band (90%).
const BAND: f64 = 0.9;

/// Calibration rank histogram of simulation-based calibration (Talts et al.
/// 2018): `ranks` are the ranks of the true value among `draws` posterior
/// draws (each in `0..=draws`), grouped into `bins` bins, with the central
/// 90% range of each bin's count under uniform ranks (binomial).
pub fn calibration_figure(
    subject: &str,
    ranks: &[usize],
    draws: usize,
    bins: usize,
) -> Result<String, PlotError> {
    let figure = "calibration";
    if ranks.is_empty() {
        return Err(PlotError::Empty {
            figure,
            what: "the list of ranks".into(),
        });
    }
    let values = draws + 1;
    let bins = bins.clamp(1, values);
    if let Some((k, r)) = ranks.iter().enumerate().find(|(_, r)| **r > draws) {
        let what = format!(
            "rank number {} is {r}, more than the {draws} posterior draws",
            k + 1
        );
        let fix = "give ranks from 0 to the number of draws per simulation".to_string();
        return Err(PlotError::OutOfRange { figure, what, fix });
    }
    let bin_of = |r: usize| r * bins / values;
    let mut counts = vec![0usize; bins];
    for r in ranks {
        counts[bin_of(*r)] += 1;
    }
    let n = ranks.len() as u64;
    // each bin covers the rank values whose bin_of lands there
    let band: Vec<(f64, f64, f64)> = (0..bins)
        .map(|b| {
            let share = (0..values).filter(|r| bin_of(*r) == b).count() as f64 / values as f64;
            uniform_band(share, n)
        })
        .collect();
    let tallest = counts
        .iter()
        .map(|c| *c as f64)
        .chain(band.iter().map(|b| b.2))
        .fold(1.0, f64::max);
    let y = (0.0, tallest * 1.12);
    let left = left_margin(y, true);
    let top = HEADING + 8.0 + legend_height(1) + 10.0;
    let frame = Frame {
        left,
        top,
        width: WIDTH - left - 20.0,
        height: 260.0,
        x: (0.0, values as f64),
        y,
    };
    // bin b holds the rank values r with bin_of(r) == b: [start(b), start(b + 1))
    let start = |b: usize| (b * values).div_ceil(bins) as f64;
    let outside = counts
        .iter()
        .zip(&band)
        .filter(|(c, b)| (**c as f64) < b.0 || (**c as f64) > b.2)
        .count();
    let desc = format!(
        "Calibration ranks of {subject} from {} simulations with {draws} posterior draws each, in {bins} bins, against the {:.0}% range of a uniform histogram; {outside} bins fall outside it.",
        ranks.len(),
        BAND * 100.0
    );
    let entries = vec![
        (
            Key::Swatch(SKY_BLUE, 1.0),
            "simulations per rank bin".to_string(),
        ),
        (
            Key::Swatch(INK, 0.15),
            format!("{:.0}% range if ranks are uniform", BAND * 100.0),
        ),
    ];
    let mut sheet = Sheet::new(WIDTH, frame.bottom() + 52.0, figure, subject, &desc);
    legend(&mut sheet, left, HEADING + 8.0, frame.width, &entries);
    let steps = |pick: fn(&(f64, f64, f64)) -> f64| -> Vec<(f64, f64)> {
        band.iter()
            .enumerate()
            .flat_map(|(b, v)| {
                [
                    (frame.px(start(b)), frame.py(pick(v))),
                    (frame.px(start(b + 1)), frame.py(pick(v))),
                ]
            })
            .collect()
    };
    let (upper, lower, expected) = (steps(|v| v.2), steps(|v| v.0), steps(|v| v.1));
    let outline = upper.iter().copied().chain(lower.iter().rev().copied());
    sheet.push(fill_path(polygon_d(outline), INK, 0.12));
    let bars: String = counts
        .iter()
        .enumerate()
        .map(|(b, c)| {
            let gap = 0.06 * (start(b + 1) - start(b));
            let (x0, x1) = (frame.px(start(b) + gap), frame.px(start(b + 1) - gap));
            polygon_d([
                (x0, frame.py(0.0)),
                (x0, frame.py(*c as f64)),
                (x1, frame.py(*c as f64)),
                (x1, frame.py(0.0)),
            ])
        })
        .collect();
    sheet.push(fill_path(bars, SKY_BLUE, 0.85));
    let edges = format!("{}{}", polyline_d(upper), polyline_d(lower));
    sheet.push(stroke_path(edges, INK, 0.8));
    sheet.push(stroke_path(polyline_d(expected), INK, 1.0).with("stroke-dasharray", "4 3"));
    frame.x_axis(&mut sheet, Some("rank of the true value among the draws"));
    frame.y_axis(&mut sheet, Some("simulations"));
    Ok(sheet.finish())
}

/// Lower quantile, mean and upper quantile of Binomial(n, share): the count
/// one bin holds under uniform ranks.
fn uniform_band(share: f64, n: u64) -> (f64, f64, f64) {
    let tail = (1.0 - BAND) / 2.0;
    match Binomial::new(share.clamp(0.0, 1.0), n) {
        Ok(b) => (
            b.inverse_cdf(tail) as f64,
            share * n as f64,
            b.inverse_cdf(1.0 - tail) as f64,
        ),
        Err(_) => (0.0, share * n as f64, n as f64),
    }
}
