//! The steps figure of an ordered category (`steps(c)`): the effect of
//! each level against the lowest as a staircase read left to right, lowest
//! level first. Each level is a tread — a flat line at its posterior mean
//! across the level's slot, over a tinted block from the lower to the
//! upper end of its interval — and a thin riser joins neighbouring treads,
//! so an uneven climb (one tall step among small ones) shows at a glance.
//! The lowest level's tread sits on the dashed zero line by construction.

use super::canvas::{
    Attr, clip_to_width, extent, left_margin, legend, legend_height, legend_rows, line, padded, rect, text, Anchor, Frame, Key,
    Sheet, HEADING, MEDIUM, SMALL, WIDTH,
};
use super::palette::{series, INK};
use super::{PlotError, Quantity};

/// One level's effect against the lowest level.
#[derive(Debug, Clone, PartialEq)]
pub struct StepLevel {
    pub label: String,
    pub mean: f64,
    pub lower: f64,
    pub upper: f64,
}

/// Height of the panel.
const PANEL: f64 = 260.0;
/// Share of a level's slot its tread spans.
const TREAD: f64 = 0.7;

/// The figure: `subject` names the term (`canopy in m_yield`), `value`
/// the scale of the effects, `interval` the interval's words.
pub fn steps_figure(subject: &str, value: &Quantity, interval: &str, levels: &[StepLevel]) -> Result<String, PlotError> {
    let figure = "steps";
    if levels.len() < 2 || !levels.iter().all(|l| l.mean.is_finite() && l.lower.is_finite() && l.upper.is_finite()) {
        return Err(PlotError::Empty { figure, what: "the levels' effects".into() });
    }
    let colour = series(0);
    let entries = vec![
        (Key::Stroke(colour, 2.4, false), "effect against the lowest level (posterior mean)".to_string()),
        (Key::Swatch(colour, 0.2), interval.to_string()),
    ];
    let legend_top = HEADING + 8.0;
    let top = legend_top + legend_height(legend_rows(&entries, WIDTH - 24.0)) + 14.0;
    let values: Vec<f64> = levels.iter().flat_map(|l| [l.lower, l.upper, l.mean]).chain([0.0]).collect();
    let ys = extent(&values).unwrap_or((0.0, 1.0));
    let y = padded(ys.0, ys.1, 0.08);
    let left = left_margin(y, true) + 12.0;
    let n = levels.len() as f64;
    let frame = Frame { left, top, width: WIDTH - left - 20.0, height: PANEL, x: (0.0, n), y };
    let last = &levels[levels.len() - 1];
    let desc = format!(
        "Steps of {subject}: the effect of each of {} levels against the lowest, {}, on the scale of {}; the highest, {}, \
         stands at {} ({interval} {} to {}).",
        levels.len(),
        levels[0].label,
        value.label(),
        last.label,
        short(last.mean),
        short(last.lower),
        short(last.upper)
    );
    let mut sheet = Sheet::new(WIDTH, frame.bottom() + 60.0, figure, subject, &desc);
    legend(&mut sheet, 12.0, legend_top, WIDTH - 24.0, &entries);
    frame.horizontal_reference(&mut sheet, 0.0);
    let half = TREAD / 2.0;
    for (i, level) in levels.iter().enumerate() {
        let centre = i as f64 + 0.5;
        let (x0, x1) = (frame.px(centre - half), frame.px(centre + half));
        let (top_px, bottom_px) = (frame.py(level.upper), frame.py(level.lower));
        sheet.push(rect(x0, top_px, x1 - x0, (bottom_px - top_px).max(1.0), colour).with("fill-opacity", "0.2"));
        sheet.push(line(x0, frame.py(level.mean), x1, frame.py(level.mean), colour, 2.4));
        if let Some(next) = levels.get(i + 1) {
            let riser = frame.px(centre + 0.5);
            sheet.push(line(x1, frame.py(level.mean), riser, frame.py(level.mean), colour, 1.0));
            sheet.push(line(riser, frame.py(level.mean), riser, frame.py(next.mean), colour, 1.0));
            sheet.push(line(riser, frame.py(next.mean), frame.px(centre + 1.0 - half), frame.py(next.mean), colour, 1.0));
        }
        let slot = frame.width / n;
        sheet.push(text(frame.px(centre), frame.bottom() + 17.0, &clip_to_width(&level.label, SMALL, slot - 4.0), SMALL, Anchor::Middle));
    }
    sheet.push(line(frame.left, frame.bottom(), frame.right(), frame.bottom(), INK, 0.8));
    frame.y_axis(&mut sheet, Some(&value.label()));
    let caption = "levels lowest first; each tread is a level, each riser a step between neighbours";
    sheet.push(text(WIDTH / 2.0, frame.bottom() + 42.0, &clip_to_width(caption, MEDIUM, WIDTH - 24.0), MEDIUM, Anchor::Middle));
    Ok(sheet.finish())
}

fn short(x: f64) -> String {
    if x.abs() >= 100.0 {
        format!("{x:.0}")
    } else if x.abs() >= 1.0 {
        format!("{x:.2}")
    } else {
        format!("{x:.3}")
    }
}
