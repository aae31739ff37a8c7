//! The robustness figure: a fitted contrast under an assumed hidden common
//! cause, over its two strengths.
//!
//! Tiles over (hidden cause → exposure, hidden cause → outcome) are shaded
//! blue where the moved interval still excludes zero on the fitted side,
//! left pale where it holds zero, and vermillion where the mean has crossed
//! zero; two
//! curves mark where the interval first reaches zero (dashed) and where the
//! mean does (solid); observed predictors sit on the same axes as diamonds,
//! labelled, as yardsticks.

use super::canvas::{
    diamond, legend, legend_height, legend_rows, rect, stroke_path, text, Anchor, Attr, Frame, Key, Sheet, HEADING,
    SMALL, WIDTH,
};
use super::palette::{BLUE, INK, VERMILLION};
use super::PlotError;

/// What the figure shows (plain data, so `plot` knows nothing of queries).
pub struct RobustnessPicture<'a> {
    pub subject: &'a str,
    pub exposure: &'a str,
    pub outcome: &'a str,
    pub to_exposure: &'a [f64],
    pub to_outcome: &'a [f64],
    /// `[γ index][δ index]`.
    pub adjusted_mean: &'a [Vec<f64>],
    pub still_excludes_zero: &'a [Vec<bool>],
    /// Sign of the fitted mean (the mean crosses zero where adjusted·sign < 0).
    pub sign: f64,
    pub explain_away: f64,
    pub interval_reaches_zero: f64,
    pub interval: &'a str,
    /// (name, δ, γ) of each yardstick.
    pub yardsticks: &'a [(String, f64, f64)],
}

/// Draw the robustness figure.
pub fn robustness_figure(p: &RobustnessPicture) -> Result<String, PlotError> {
    let (nx, ny) = (p.to_exposure.len(), p.to_outcome.len());
    if nx < 2 || ny < 2 || p.adjusted_mean.len() != ny {
        return Err(PlotError::Empty { figure: "robustness", what: "the grid of strengths".into() });
    }
    let (dx, dy) = (p.to_exposure[nx - 1], p.to_outcome[ny - 1]);
    let entries = vec![
        (Key::Swatch(BLUE, 0.35), format!("{} still excludes 0", p.interval)),
        (Key::Swatch(VERMILLION, 0.35), "mean has crossed 0".to_string()),
        (Key::Stroke(INK, 1.6, true), format!("{} reaches 0", p.interval)),
        (Key::Stroke(INK, 2.2, false), "mean reaches 0".to_string()),
        (Key::Diamond(INK), "observed predictor as yardstick".to_string()),
    ];
    let (left, width) = (78.0, WIDTH - 78.0 - 24.0);
    let top = HEADING + 8.0 + legend_height(legend_rows(&entries, width)) + 12.0;
    let frame = Frame { left, top, width, height: 330.0, x: (0.0, dx), y: (0.0, dy) };
    let desc = format!(
        "How the contrast of {} on {} moves under an assumed hidden common cause: the mean reaches zero where the product of \
         the two strengths is {:.3}, the interval where it is {:.3}.",
        p.exposure, p.outcome, p.explain_away, p.interval_reaches_zero
    );
    let mut sheet = Sheet::new(WIDTH, frame.bottom() + 60.0, "robustness to a hidden cause", p.subject, &desc);
    legend(&mut sheet, frame.left, HEADING + 8.0, frame.width, &entries);
    let (w, h) = (frame.width / (nx - 1) as f64, frame.height / (ny - 1) as f64);
    for (i, g) in p.to_outcome.iter().enumerate() {
        for (j, d) in p.to_exposure.iter().enumerate() {
            let crossed = p.adjusted_mean[i][j] * p.sign < 0.0;
            let (colour, opacity) = match (crossed, p.still_excludes_zero[i][j]) {
                (true, _) => (VERMILLION, 0.35),
                (false, true) => (BLUE, 0.35),
                (false, false) => continue,
            };
            let (cx, cy) = (frame.px(*d), frame.py(*g));
            let (x0, x1) = ((cx - w / 2.0).max(frame.left), (cx + w / 2.0).min(frame.right()));
            let (y0, y1) = ((cy - h / 2.0).max(frame.top), (cy + h / 2.0).min(frame.bottom()));
            sheet.push(rect(x0, y0, x1 - x0, y1 - y0, colour).with("fill-opacity", format!("{opacity:.2}")));
        }
    }
    for (k, dashed) in [(p.interval_reaches_zero, true), (p.explain_away, false)] {
        if k <= 0.0 {
            continue;
        }
        let xs: Vec<f64> = (1..=200).map(|i| dx * i as f64 / 200.0).filter(|d| k / d <= dy).collect();
        if xs.len() < 2 {
            continue;
        }
        let ys: Vec<f64> = xs.iter().map(|d| k / d).collect();
        let mut path = stroke_path(frame.curve_d(&xs, &ys), INK, if dashed { 1.6 } else { 2.2 });
        if dashed {
            path = path.with("stroke-dasharray", "6 4");
        }
        sheet.push(path);
    }
    for (name, d, g) in p.yardsticks {
        if *d > dx || *g > dy {
            continue;
        }
        let (x, y) = (frame.px(*d), frame.py(*g));
        sheet.push(diamond(x, y, 5.0, INK));
        sheet.push(text(x + 8.0, y - 6.0, name, SMALL, Anchor::Start));
    }
    frame.x_axis(&mut sheet, Some(&format!("hidden cause → {}: its mean difference (sd) per unit of {}", p.exposure, p.exposure)));
    frame.y_axis(&mut sheet, Some(&format!("hidden cause → {} (per sd)", p.outcome)));
    Ok(sheet.finish())
}
