//! The robustness figure: a fitted contrast under an assumed hidden common
//! cause, over its two strengths.
//!
//! Tiles over (hidden cause → exposure, hidden cause → outcome) are shaded
//! blue where the moved interval still excludes no effect on the fitted
//! side, left pale where it holds it, and vermillion where the mean has
//! crossed it; two curves mark where the interval first reaches no effect
//! (dashed) and where the mean does (solid); observed predictors sit on the
//! same axes as diamonds, labelled, as yardsticks. Two scales: a
//! difference moved by the product of the strengths (no effect is 0, the
//! axes start at 0), and a risk ratio moved by the bounding factor
//! `a·b/(a + b − 1)` (no effect is 1, the axes start at 1, and the E-value
//! is marked where the mean's curve meets the diagonal).

use super::canvas::{
    circle, diamond, num, legend, legend_height, legend_rows, rect, stroke_path, text, Anchor, Attr, Frame, Key, Sheet, HEADING,
    SMALL, WIDTH,
};
use super::palette::{BLUE, INK, VERMILLION};
use super::PlotError;

/// How the two strengths act on the contrast.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum StrengthScale {
    /// A difference moved by δ·γ; curves where the product is a given value.
    Product,
    /// A risk ratio moved by the bounding factor of two risk ratios; curves
    /// where the factor is a given value.
    RiskRatio,
    /// A count outcome's rate ratio, moved as a risk ratio is; the
    /// outcome's axis is the hidden cause's rate ratio with it.
    RateRatio,
}

/// What the figure shows (plain data, so `plot` knows nothing of queries).
pub struct RobustnessPicture<'a> {
    pub subject: &'a str,
    pub exposure: &'a str,
    pub outcome: &'a str,
    pub scale: StrengthScale,
    pub to_exposure: &'a [f64],
    pub to_outcome: &'a [f64],
    /// Whether the moved mean has crossed no effect, `[outcome index][exposure index]`.
    pub crossed: &'a [Vec<bool>],
    /// Whether the moved interval still excludes no effect, same layout.
    pub still_excludes: &'a [Vec<bool>],
    /// The product (or bounding factor) at which the mean reaches no effect.
    pub explain_away: f64,
    /// The same for the interval's end nearer no effect (no curve when it
    /// already holds no effect: 0 for a product, 1 for a factor).
    pub interval_reaches: f64,
    pub interval: &'a str,
    /// The E-value of the mean (risk ratios only), marked on the diagonal.
    pub e_value: Option<f64>,
    /// (name, strength with the exposure, strength with the outcome) of each yardstick.
    pub yardsticks: &'a [(String, f64, f64)],
}

/// Draw the robustness figure.
pub fn robustness_figure(p: &RobustnessPicture) -> Result<String, PlotError> {
    let (nx, ny) = (p.to_exposure.len(), p.to_outcome.len());
    if nx < 2 || ny < 2 || p.crossed.len() != ny || p.still_excludes.len() != ny {
        return Err(PlotError::Empty { figure: "robustness", what: "the grid of strengths".into() });
    }
    let (x0, dx, y0, dy) = (p.to_exposure[0], p.to_exposure[nx - 1], p.to_outcome[0], p.to_outcome[ny - 1]);
    let (none, product_words) = match p.scale {
        StrengthScale::Product => ("0", "the product of the two strengths"),
        StrengthScale::RiskRatio | StrengthScale::RateRatio => ("1", "the most the two ratios can move it by"),
    };
    let mut entries = vec![
        (Key::Swatch(BLUE, 0.35), format!("{} still excludes {none}", p.interval)),
        (Key::Swatch(VERMILLION, 0.35), format!("mean has crossed {none}")),
        (Key::Stroke(INK, 1.6, true), format!("{} reaches {none}", p.interval)),
        (Key::Stroke(INK, 2.2, false), format!("mean reaches {none}")),
        (Key::Diamond(INK), "observed predictor as yardstick".to_string()),
    ];
    let e_value = p.e_value.filter(|e| *e > 1.0);
    if e_value.is_some() {
        entries.push((Key::Dot(VERMILLION, true), "E-value: equal strengths that reach 1".to_string()));
    }
    let (left, width) = (78.0, WIDTH - 78.0 - 24.0);
    let top = HEADING + 8.0 + legend_height(legend_rows(&entries, width)) + 12.0;
    let frame = Frame { left, top, width, height: 330.0, x: (x0, dx), y: (y0, dy) };
    let desc = format!(
        "How the contrast of {} on {} moves under an assumed hidden common cause: the mean reaches {none} where {product_words} \
         is {:.3}, the interval where it is {:.3}.",
        p.exposure, p.outcome, p.explain_away, p.interval_reaches
    );
    let mut sheet = Sheet::new(WIDTH, frame.bottom() + 60.0, "robustness to a hidden cause", p.subject, &desc);
    legend(&mut sheet, frame.left, HEADING + 8.0, frame.width, &entries);
    let (w, h) = (frame.width / (nx - 1) as f64, frame.height / (ny - 1) as f64);
    for (i, g) in p.to_outcome.iter().enumerate() {
        for (j, d) in p.to_exposure.iter().enumerate() {
            let (colour, opacity) = match (p.crossed[i][j], p.still_excludes[i][j]) {
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
    for (k, dashed) in [(p.interval_reaches, true), (p.explain_away, false)] {
        let Some((xs, ys)) = level_curve(p.scale, k, (x0, dx), dy) else { continue };
        let mut path = stroke_path(frame.curve_d(&xs, &ys), INK, if dashed { 1.6 } else { 2.2 });
        if dashed {
            path = path.with("stroke-dasharray", "6 4");
        }
        sheet.push(path);
    }
    if let Some(e) = e_value.filter(|e| *e <= dx && *e <= dy) {
        let (x, y) = (frame.px(e), frame.py(e));
        sheet.push(circle(x, y, 4.5, VERMILLION));
        sheet.push(text(x - 8.0, y + 16.0, &format!("E-value {}", num(e)), SMALL, Anchor::End));
    }
    for (name, d, g) in p.yardsticks {
        if *d > dx || *g > dy {
            continue;
        }
        let (x, y) = (frame.px(*d), frame.py(*g));
        sheet.push(diamond(x, y, 5.0, INK));
        sheet.push(text(x + 8.0, y - 6.0, name, SMALL, Anchor::Start));
    }
    let (x_title, y_title) = match p.scale {
        StrengthScale::Product => (
            format!("hidden cause → {}: its mean difference (sd) per unit of {}", p.exposure, p.exposure),
            format!("hidden cause → {} (per sd)", p.outcome),
        ),
        StrengthScale::RiskRatio => (
            format!("hidden cause → {}: risk ratio", p.exposure),
            format!("hidden cause → {}: risk ratio", p.outcome),
        ),
        StrengthScale::RateRatio => (
            format!("hidden cause → {}: risk ratio", p.exposure),
            format!("hidden cause → {}: rate ratio", p.outcome),
        ),
    };
    frame.x_axis(&mut sheet, Some(&x_title));
    frame.y_axis(&mut sheet, Some(&y_title));
    Ok(sheet.finish())
}

/// Points of the curve where the strengths move the contrast by `k`, over
/// the x range and below `top`: `y = k/x` for a product, and for a risk
/// ratio's bounding factor `x·y/(x + y − 1) = k`, `y = k(x − 1)/(x − k)`
/// for `x > k`. `None` when no such curve is drawn (no effect already
/// reached, or fewer than two points inside).
fn level_curve(scale: StrengthScale, k: f64, x: (f64, f64), top: f64) -> Option<(Vec<f64>, Vec<f64>)> {
    let (xs, ys): (Vec<f64>, Vec<f64>) = (1..=400)
        .map(|i| x.0 + (x.1 - x.0) * i as f64 / 400.0)
        .filter_map(|a| match scale {
            StrengthScale::Product if k > 0.0 => Some((a, k / a)),
            StrengthScale::RiskRatio | StrengthScale::RateRatio if k > 1.0 && a > k => Some((a, k * (a - 1.0) / (a - k))),
            _ => None,
        })
        .filter(|(_, b)| *b <= top)
        .unzip();
    (xs.len() >= 2).then_some((xs, ys))
}
