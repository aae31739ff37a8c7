//! Curves along a predictor: fitted lines with interval bands over the data,
//! a contrast along a grid, and a B-spline fit with its weights.
//!
//! Callers pass curves already summarised on a grid (mean, lower, upper),
//! so this module draws and never computes a posterior summary itself —
//! except the spline figure, which forms the weighted sums from the weight
//! draws, because its band and its weight strip come from the same draws.

use super::canvas::{
    diamond, dot_cloud, extent, fill_path, left_margin, legend, legend_height, legend_rows, num,
    padded, stroke_path, Frame, Key, Sheet, HEADING, WIDTH,
};
use super::density::{quantile, thin_indices};
use super::palette::{series, BLUE, INK, MUTED};
use super::{PlotError, Quantity};

/// One group (category level) of a fitted-lines figure.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct LineGroup {
    /// Level label, e.g. `"dwarf"`.
    pub label: String,
    /// Observed `(x, y)` data of this group.
    pub points: Vec<(f64, f64)>,
    /// Predictor values where the line is summarised, increasing.
    pub grid: Vec<f64>,
    /// Posterior mean of the line at each grid value.
    pub mean: Vec<f64>,
    /// Lower interval bound at each grid value.
    pub lower: Vec<f64>,
    /// Upper interval bound at each grid value.
    pub upper: Vec<f64>,
}

/// A contrast summarised along a grid of a predictor.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct GridContrast {
    pub grid: Vec<f64>,
    pub mean: Vec<f64>,
    pub lower: Vec<f64>,
    pub upper: Vec<f64>,
}

/// A B-spline fit: the basis on a grid and draws of its weights.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct BasisPicture {
    /// Predictor values, increasing.
    pub grid: Vec<f64>,
    /// `basis[k][i]` is basis function `k` at `grid[i]`.
    pub basis: Vec<Vec<f64>>,
    /// `weights[d][k]` is the weight of basis function `k` in draw `d`.
    pub weights: Vec<Vec<f64>>,
    /// Intercept per draw; empty when the model has none.
    pub intercept: Vec<f64>,
    /// Observed `(x, y)` data, drawn faintly behind the curves.
    pub points: Vec<(f64, f64)>,
}

const MAX_POINTS: usize = 3000;
const PANEL_HEIGHT: f64 = 300.0;

fn check_len(
    figure: &'static str,
    what: String,
    found: usize,
    expected: usize,
) -> Result<(), PlotError> {
    if found == expected {
        Ok(())
    } else {
        Err(PlotError::Length {
            figure,
            what,
            found,
            expected,
            per: "grid value",
        })
    }
}

fn check_curve(
    figure: &'static str,
    owner: &str,
    grid: &[f64],
    mean: &[f64],
    lower: &[f64],
    upper: &[f64],
) -> Result<(), PlotError> {
    if extent(grid).is_none() {
        return Err(PlotError::Empty {
            figure,
            what: format!("the grid of {owner}"),
        });
    }
    check_len(
        figure,
        format!("the mean of {owner}"),
        mean.len(),
        grid.len(),
    )?;
    check_len(
        figure,
        format!("the lower bound of {owner}"),
        lower.len(),
        grid.len(),
    )?;
    check_len(
        figure,
        format!("the upper bound of {owner}"),
        upper.len(),
        grid.len(),
    )
}

/// Lay out one panel below a legend; returns the frame and figure height.
fn single_panel(x: (f64, f64), y: (f64, f64), legend_rows: usize) -> (Frame, f64) {
    let left = left_margin(y, true);
    let top = HEADING + 8.0 + legend_height(legend_rows) + 10.0;
    let frame = Frame {
        left,
        top,
        width: WIDTH - left - 20.0,
        height: PANEL_HEIGHT,
        x,
        y,
    };
    (frame, frame.bottom() + 52.0)
}

/// Fitted lines with interval bands over the scattered data, one colour per
/// group, with a legend naming the groups and the band.
pub fn lines_figure(
    subject: &str,
    x: &Quantity,
    y: &Quantity,
    interval: &str,
    groups: &[LineGroup],
) -> Result<String, PlotError> {
    if groups.is_empty() {
        return Err(PlotError::Empty {
            figure: "fitted lines",
            what: "the list of groups".into(),
        });
    }
    for g in groups {
        check_curve(
            "fitted lines",
            &format!("group {}", g.label),
            &g.grid,
            &g.mean,
            &g.lower,
            &g.upper,
        )?;
    }
    let xs = extent(
        groups
            .iter()
            .flat_map(|g| g.grid.iter().chain(g.points.iter().map(|p| &p.0))),
    );
    let ys = extent(groups.iter().flat_map(|g| {
        g.lower
            .iter()
            .chain(&g.upper)
            .chain(g.points.iter().map(|p| &p.1))
    }));
    let (xs, ys) = (xs.unwrap_or((0.0, 1.0)), ys.unwrap_or((0.0, 1.0)));
    let mut entries: Vec<(Key, String)> = groups
        .iter()
        .enumerate()
        .map(|(i, g)| (Key::Stroke(series(i), 2.4, false), g.label.clone()))
        .collect();
    entries.push((Key::Swatch(INK, 0.18), format!("band: {interval}")));
    let rows = legend_rows(&entries, WIDTH - 100.0);
    let (frame, height) = single_panel(padded(xs.0, xs.1, 0.02), padded(ys.0, ys.1, 0.05), rows);
    let desc = format!(
        "Fitted {} against {} for {}, with {} bands over the observed data.",
        y.name,
        x.name,
        groups
            .iter()
            .map(|g| g.label.as_str())
            .collect::<Vec<_>>()
            .join(", "),
        interval
    );
    let mut sheet = Sheet::new(WIDTH, height, "fitted lines", subject, &desc);
    legend(&mut sheet, frame.left, HEADING + 8.0, frame.width, &entries);
    for (i, g) in groups.iter().enumerate() {
        let keep: Vec<(f64, f64)> = thin_indices(g.points.len(), MAX_POINTS)
            .iter()
            .map(|k| g.points[*k])
            .collect();
        sheet.push(dot_cloud(&frame, &keep, series(i)));
    }
    for (i, g) in groups.iter().enumerate() {
        sheet.push(fill_path(
            frame.band_d(&g.grid, &g.lower, &g.upper),
            series(i),
            0.2,
        ));
    }
    for (i, g) in groups.iter().enumerate() {
        sheet.push(stroke_path(frame.curve_d(&g.grid, &g.mean), series(i), 2.4));
    }
    frame.x_axis(&mut sheet, Some(&x.label()));
    frame.y_axis(&mut sheet, Some(&y.label()));
    Ok(sheet.finish())
}

/// A contrast along a grid of a predictor: its interval band, its mean line
/// and a zero line.
pub fn contrast_grid_figure(
    subject: &str,
    x: &Quantity,
    contrast: &Quantity,
    interval: &str,
    c: &GridContrast,
) -> Result<String, PlotError> {
    check_curve(
        "contrast along a grid",
        subject,
        &c.grid,
        &c.mean,
        &c.lower,
        &c.upper,
    )?;
    let xs = extent(&c.grid).map_or((0.0, 1.0), |(lo, hi)| padded(lo, hi, 0.0));
    let ys = extent(c.lower.iter().chain(&c.upper).chain(&[0.0])).unwrap_or((0.0, 1.0));
    let entries = vec![
        (Key::Stroke(BLUE, 2.4, false), "posterior mean".to_string()),
        (Key::Swatch(BLUE, 0.25), interval.to_string()),
        (Key::Stroke(INK, 1.0, true), "no difference".to_string()),
    ];
    let (frame, height) = single_panel(xs, padded(ys.0, ys.1, 0.06), 1);
    let desc = format!(
        "Contrast {subject} along {} from {} to {}: posterior mean line, {interval} band and a dashed zero line.",
        x.name,
        c.grid[0],
        c.grid[c.grid.len() - 1]
    );
    let mut sheet = Sheet::new(WIDTH, height, "contrast along a grid", subject, &desc);
    legend(&mut sheet, frame.left, HEADING + 8.0, frame.width, &entries);
    sheet.push(fill_path(
        frame.band_d(&c.grid, &c.lower, &c.upper),
        BLUE,
        0.25,
    ));
    frame.horizontal_reference(&mut sheet, 0.0);
    sheet.push(stroke_path(frame.curve_d(&c.grid, &c.mean), BLUE, 2.4));
    frame.x_axis(&mut sheet, Some(&x.label()));
    frame.y_axis(&mut sheet, Some(&contrast.label()));
    Ok(sheet.finish())
}

const WEIGHT_PANEL: f64 = 96.0;

/// A B-spline fit the way a scientist reads it: the fitted curve (posterior
/// mean) with its pointwise central band of `mass` (0.9 for 90%) over the
/// data, and under it, on the same axis, a strip with each weight's
/// interval of the same mass and mean drawn where its basis function
/// peaks, so a wide or sign-changing weight shows which stretch of the
/// predictor it governs.
pub fn spline_figure(
    subject: &str,
    x: &Quantity,
    y: &Quantity,
    p: &BasisPicture,
    mass: f64,
) -> Result<String, PlotError> {
    let figure = "spline fit";
    if !(mass > 0.0 && mass < 1.0) {
        return Err(PlotError::OutOfRange {
            figure,
            what: format!("an interval mass of {mass}"),
            fix: "give a mass between 0 and 1 (0.9 for 90%)".into(),
        });
    }
    if extent(&p.grid).is_none() || p.basis.is_empty() {
        return Err(PlotError::Empty {
            figure,
            what: "the grid or the basis".into(),
        });
    }
    if p.weights.is_empty() {
        return Err(PlotError::Empty {
            figure,
            what: "the weight draws".into(),
        });
    }
    for (k, b) in p.basis.iter().enumerate() {
        check_len(
            figure,
            format!("basis function {}", k + 1),
            b.len(),
            p.grid.len(),
        )?;
    }
    for (d, w) in p.weights.iter().enumerate() {
        if w.len() != p.basis.len() {
            let what = format!("weight draw {}", d + 1);
            return Err(PlotError::Length {
                figure,
                what,
                found: w.len(),
                expected: p.basis.len(),
                per: "basis function",
            });
        }
    }
    if !p.intercept.is_empty() && p.intercept.len() != p.weights.len() {
        let (found, expected) = (p.intercept.len(), p.weights.len());
        return Err(PlotError::Length {
            figure,
            what: "the intercept draws".into(),
            found,
            expected,
            per: "weight draw",
        });
    }
    let draws = p.weights.len();
    let intercept = |d: usize| p.intercept.get(d).copied().unwrap_or(0.0);
    // curves[i][d]: the fitted curve of draw d at grid point i
    let curves: Vec<Vec<f64>> = (0..p.grid.len())
        .map(|i| {
            let mut at: Vec<f64> = (0..draws)
                .map(|d| {
                    intercept(d)
                        + p.basis.iter().zip(&p.weights[d]).map(|(b, w)| b[i] * w).sum::<f64>()
                })
                .collect();
            at.sort_by(f64::total_cmp);
            at
        })
        .collect();
    let tail = (1.0 - mass) / 2.0;
    let mean: Vec<f64> = curves.iter().map(|c| c.iter().sum::<f64>() / draws as f64).collect();
    let lower: Vec<f64> = curves.iter().map(|c| quantile(c, tail)).collect();
    let upper: Vec<f64> = curves.iter().map(|c| quantile(c, 1.0 - tail)).collect();
    // one summary per weight: where its basis function peaks, mean, interval
    let weights: Vec<(f64, f64, f64, f64)> = p
        .basis
        .iter()
        .enumerate()
        .map(|(k, b)| {
            let peak = b
                .iter()
                .enumerate()
                .max_by(|a, c| a.1.total_cmp(c.1))
                .map_or(0, |(i, _)| i);
            let mut w: Vec<f64> = p.weights.iter().map(|d| d[k]).collect();
            w.sort_by(f64::total_cmp);
            let m = w.iter().sum::<f64>() / draws as f64;
            (p.grid[peak], m, quantile(&w, tail), quantile(&w, 1.0 - tail))
        })
        .collect();

    let xs = extent(&p.grid).map_or((0.0, 1.0), |(lo, hi)| padded(lo, hi, 0.02));
    let ys = extent(
        lower
            .iter()
            .chain(&upper)
            .chain(p.points.iter().map(|q| &q.1)),
    )
    .unwrap_or((0.0, 1.0));
    let y_range = padded(ys.0, ys.1, 0.05);
    let ws = extent(weights.iter().flat_map(|w| [&w.2, &w.3]).chain(&[0.0])).unwrap_or((0.0, 1.0));
    let w_range = padded(ws.0, ws.1, 0.08);
    let left = left_margin(y_range, true).max(left_margin(w_range, true));
    let width = WIDTH - left - 20.0;
    let colour = series(0);
    let interval = format!("{}% interval", (mass * 1000.0).round() / 10.0);
    let entries = vec![
        (Key::Stroke(colour, 2.4, false), "posterior mean".to_string()),
        (Key::Swatch(colour, 0.25), format!("band: {interval}")),
        (Key::Diamond(colour), format!("weight: mean and {interval}")),
    ];
    let rows = legend_rows(&entries, width);
    let main = Frame {
        left,
        top: HEADING + 8.0 + legend_height(rows) + 10.0,
        width,
        height: PANEL_HEIGHT - 40.0,
        x: xs,
        y: y_range,
    };
    let strip = Frame {
        left,
        top: main.bottom() + 30.0,
        width,
        height: WEIGHT_PANEL,
        x: xs,
        y: w_range,
    };
    let desc = format!(
        "B-spline fit of {} along {} with {} basis functions: the posterior mean curve and its pointwise {interval} over the data, and below each weight's {interval} at the peak of its basis function.",
        y.name,
        x.name,
        p.basis.len(),
    );
    let mut sheet = Sheet::new(WIDTH, strip.bottom() + 52.0, figure, subject, &desc);
    legend(&mut sheet, left, HEADING + 8.0, width, &entries);
    let keep: Vec<(f64, f64)> = thin_indices(p.points.len(), MAX_POINTS)
        .iter()
        .map(|k| p.points[*k])
        .collect();
    sheet.push(dot_cloud(&main, &keep, MUTED));
    sheet.push(fill_path(main.band_d(&p.grid, &lower, &upper), colour, 0.25));
    sheet.push(stroke_path(main.curve_d(&p.grid, &mean), colour, 2.4));
    main.x_axis(&mut sheet, None);
    main.y_axis(&mut sheet, Some(&y.label()));

    strip.horizontal_reference(&mut sheet, 0.0);
    let bars: String = weights
        .iter()
        .map(|w| format!("M{},{}V{}", num(strip.px(w.0)), num(strip.py(w.2)), num(strip.py(w.3))))
        .collect();
    sheet.push(stroke_path(bars, INK, 2.4));
    for w in &weights {
        sheet.push(diamond(strip.px(w.0), strip.py(w.1), 4.5, colour));
    }
    strip.x_axis(&mut sheet, Some(&x.label()));
    strip.y_axis(&mut sheet, Some("weight"));
    Ok(sheet.finish())
}
