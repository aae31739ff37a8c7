//! The shrinkage figure of a pooled group: one row per level, from the
//! level's own rows' mean (an open circle whose area grows with the level's
//! rows) along a grey pull line to its pooled estimate (a filled dot on its
//! interval), over the population's line and band. Long pull lines on small
//! circles are levels that partial pooling moved a lot because they had
//! little data; big circles barely move.

use super::canvas::{
    Attr,
    circle, clip_to_width, extent, legend, legend_height, legend_rows, line, padded, rect, text, text_width, Anchor, Frame,
    Key, Sheet, HEADING, MEDIUM, SMALL, WIDTH,
};
use super::palette::{BLUISH_GREEN, INK, MUTED, REDDISH_PURPLE};
/// The pooled estimates and the population take the first two colours of
/// the palette's series order.
const POOLED: &str = BLUISH_GREEN;
const POPULATION: &str = REDDISH_PURPLE;
use super::{PlotError, Quantity};

/// One level of a pooled group, as the figure draws it.
#[derive(Debug, Clone, PartialEq)]
pub struct ShrinkageRow {
    /// The level's label.
    pub label: String,
    /// Its rows in the fitted data.
    pub rows: usize,
    /// The rows' own mean on the shown scale, when the level has rows.
    pub raw: Option<f64>,
    /// Pooled estimate: posterior mean and interval.
    pub mean: f64,
    pub lower: f64,
    pub upper: f64,
}

/// Height of one level's row.
const ROW: f64 = 22.0;
/// The most levels drawn; beyond it, those with the most rows.
pub const MOST_LEVELS: usize = 80;
/// Radius of the open circle of the level with the most rows.
const LARGEST: f64 = 9.0;
/// Radius of the open circle of a level with no rows left to see.
const SMALLEST: f64 = 2.0;

/// The figure: `population` is the population line's mean, lower and upper
/// end; `value` names the scale both estimates are on.
pub fn shrinkage_figure(
    subject: &str,
    value: &Quantity,
    interval: &str,
    population: [f64; 3],
    levels: &[ShrinkageRow],
) -> Result<String, PlotError> {
    let figure = "shrinkage";
    let finite = |r: &&ShrinkageRow| r.mean.is_finite() && r.lower.is_finite() && r.upper.is_finite();
    let mut shown: Vec<&ShrinkageRow> = levels.iter().filter(finite).collect();
    if shown.is_empty() || !population.iter().all(|v| v.is_finite()) {
        return Err(PlotError::Empty { figure, what: "the levels' pooled estimates".into() });
    }
    let left_out = shown.len().saturating_sub(MOST_LEVELS);
    if left_out > 0 {
        shown.sort_by(|a, b| b.rows.cmp(&a.rows));
        shown.truncate(MOST_LEVELS);
    }
    shown.sort_by(|a, b| b.raw.unwrap_or(b.mean).total_cmp(&a.raw.unwrap_or(a.mean)));
    let most_rows = shown.iter().map(|r| r.rows).max().unwrap_or(1).max(1) as f64;
    let radius = |rows: usize| SMALLEST + (LARGEST - SMALLEST) * (rows as f64 / most_rows).sqrt();
    let labels: Vec<String> = shown.iter().map(|r| format!("{} ({} rows)", r.label, r.rows)).collect();
    let label_width = labels.iter().map(|l| text_width(l, SMALL)).fold(0.0, f64::max);
    let left = (label_width + 24.0).min(WIDTH * 0.4);
    let width = WIDTH - left - 24.0;
    let entries = vec![
        (Key::Dot(INK, false), "level's own rows (area: rows)".to_string()),
        (Key::Stroke(MUTED, 1.2, false), "pull of pooling".to_string()),
        (Key::Dot(POOLED, true), format!("pooled, {interval}")),
        (Key::Stroke(POPULATION, 1.6, true), format!("population, a new level (band: {interval})")),
    ];
    let legend_top = HEADING + 8.0;
    let top = legend_top + legend_height(legend_rows(&entries, WIDTH - 24.0)) + 14.0;
    let height = ROW * shown.len() as f64;
    let values = shown
        .iter()
        .flat_map(|r| [r.lower, r.upper, r.mean].into_iter().chain(r.raw))
        .chain(population)
        .collect::<Vec<f64>>();
    let xs = extent(&values).unwrap_or((0.0, 1.0));
    let frame = Frame { left, top, width, height, x: padded(xs.0, xs.1, 0.06), y: (0.0, 1.0) };
    let moved = shown.iter().filter_map(|r| r.raw.map(|raw| (raw - r.mean).abs())).fold(0.0, f64::max);
    let left_out_words = if left_out > 0 { format!("; {left_out} levels with the fewest rows are not drawn") } else { String::new() };
    let desc = format!(
        "Shrinkage of {subject}: for {} levels, the mean of each level's own rows against its pooled estimate (posterior mean, {interval}) on the scale of {}, with the population's estimate {} ({interval} {} to {}); the largest pull is {}{left_out_words}.",
        shown.len(),
        value.label(),
        short(population[0]),
        short(population[1]),
        short(population[2]),
        short(moved)
    );
    let caption_top = frame.bottom() + 52.0;
    let mut sheet = Sheet::new(WIDTH, caption_top + 20.0, figure, subject, &desc);
    legend(&mut sheet, 12.0, legend_top, WIDTH - 24.0, &entries);
    let band_left = frame.px(population[1]);
    sheet.push(rect(band_left, top, frame.px(population[2]) - band_left, height, POPULATION).with("fill-opacity", "0.15"));
    let mid = frame.px(population[0]);
    sheet.push(line(mid, top, mid, frame.bottom(), POPULATION, 1.6).with("stroke-dasharray", "5 3"));
    for (i, (r, label)) in shown.iter().zip(&labels).enumerate() {
        let y = top + ROW * (i as f64 + 0.5);
        sheet.push(text(left - 10.0, y + 4.0, &clip_to_width(label, SMALL, left - 16.0), SMALL, Anchor::End));
        sheet.push(line(frame.px(r.lower), y, frame.px(r.upper), y, POOLED, 2.6).with("stroke-opacity", "0.55"));
        if let Some(raw) = r.raw {
            sheet.push(line(frame.px(raw), y, frame.px(r.mean), y, MUTED, 1.2));
            sheet.push(
                circle(frame.px(raw), y, radius(r.rows), "none")
                    .with("stroke", INK)
                    .with("stroke-width", "1.4"),
            );
        }
        sheet.push(circle(frame.px(r.mean), y, 3.6, POOLED));
    }
    frame.x_axis(&mut sheet, Some(&value.label()));
    let (fewest, most) = (shown.iter().map(|r| r.rows).min().unwrap_or(0), shown.iter().map(|r| r.rows).max().unwrap_or(0));
    let caption = format!("circle area grows with the level's rows: {fewest} to {most}{left_out_words}");
    sheet.push(text(WIDTH / 2.0, caption_top + 6.0, &clip_to_width(&caption, MEDIUM, WIDTH - 24.0), MEDIUM, Anchor::Middle));
    Ok(sheet.finish())
}

fn short(x: f64) -> String {
    let magnitude = x.abs();
    if magnitude >= 100.0 {
        format!("{x:.0}")
    } else if magnitude >= 1.0 {
        format!("{x:.2}")
    } else {
        format!("{x:.3}")
    }
}
