//! The survival-curve figure of a time contrast: on top, the share of
//! units still without the event at each time, one curve and band per
//! setting; below, on the same time axis, the hazard — the rate of events
//! among those still waiting.
//!
//! The second setting is drawn dashed as well as in its own colour, so the
//! two settings part without hue. A stated time (`on events by T`) is a
//! dashed vertical line through both panels; a stated share of events
//! (`on quantile q`, medians at one half) a dashed horizontal line where
//! the survival curve crosses `1 − q`. A hazard that climbs without bound
//! towards time 0 (shape below 1) would flatten the rest of its panel, so
//! the panel's top is set by the later nine tenths of the grid and higher
//! values are drawn at the top edge, which the description says.

use super::canvas::{
    extent, fill_path, left_margin, legend, legend_height, legend_rows, padded, stroke_path, Attr, Frame, Key,
    Sheet, HEADING, WIDTH,
};
use super::palette::{series, INK};
use super::{PlotError, Quantity};

/// One curve with its band, summarised at every grid time.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct CurveBand {
    pub mean: Vec<f64>,
    pub lower: Vec<f64>,
    pub upper: Vec<f64>,
}

/// The curves of one setting.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct SurvivalSetting {
    /// Legend label, e.g. `"warmth 25"`.
    pub label: String,
    pub survival: CurveBand,
    pub hazard: CurveBand,
}

/// What the contrast states on the time axis, marked in the figure.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum SurvivalMark {
    /// A time: the chance of an event by it is compared.
    Time(f64),
    /// A share of events: the time by which it has come is compared.
    Share(f64),
}

/// Everything the figure draws.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct SurvivalPicture {
    /// Grid times, increasing.
    pub times: Vec<f64>,
    pub settings: Vec<SurvivalSetting>,
    pub mark: Option<SurvivalMark>,
}

const PANEL: f64 = 220.0;
const GAP: f64 = 58.0;

fn check(picture: &SurvivalPicture) -> Result<(), PlotError> {
    let figure = "survival curves";
    if extent(&picture.times).is_none() {
        return Err(PlotError::Empty { figure, what: "the time grid".into() });
    }
    if picture.settings.is_empty() {
        return Err(PlotError::Empty { figure, what: "the list of settings".into() });
    }
    for s in &picture.settings {
        for (name, band) in [("survival", &s.survival), ("hazard", &s.hazard)] {
            for (part, values) in [("mean", &band.mean), ("lower bound", &band.lower), ("upper bound", &band.upper)] {
                if values.len() != picture.times.len() {
                    return Err(PlotError::Length {
                        figure,
                        what: format!("the {name} {part} of {}", s.label),
                        found: values.len(),
                        expected: picture.times.len(),
                        per: "grid time",
                    });
                }
            }
        }
    }
    Ok(())
}

/// The top of the hazard panel: the highest band value over the later nine
/// tenths of the grid.
fn hazard_top(picture: &SurvivalPicture) -> f64 {
    let skip = picture.times.len() / 10;
    let top = picture
        .settings
        .iter()
        .flat_map(|s| s.hazard.upper.iter().skip(skip))
        .copied()
        .filter(|v| v.is_finite())
        .fold(0.0, f64::max);
    if top > 0.0 {
        top
    } else {
        1.0
    }
}

/// The band clamped into the panel's window.
fn clamped(values: &[f64], window: (f64, f64)) -> Vec<f64> {
    values.iter().map(|v| if v.is_finite() { v.clamp(window.0, window.1) } else { window.1 }).collect()
}

/// Draw one panel's bands, curves and axes.
fn draw_panel(sheet: &mut Sheet, frame: &Frame, times: &[f64], bands: &[&CurveBand], x_title: &str, y_title: &str) {
    for (i, b) in bands.iter().enumerate() {
        let (lower, upper) = (clamped(&b.lower, frame.y), clamped(&b.upper, frame.y));
        sheet.push(fill_path(frame.band_d(times, &lower, &upper), series(i), 0.18));
    }
    for (i, b) in bands.iter().enumerate() {
        let path = stroke_path(frame.curve_d(times, &clamped(&b.mean, frame.y)), series(i), 2.4);
        sheet.push(if i % 2 == 1 { path.with("stroke-dasharray", "7 4") } else { path });
    }
    frame.x_axis(sheet, Some(x_title));
    frame.y_axis(sheet, Some(y_title));
}

/// The survival and hazard curves of `picture` against `time` (its name
/// and unit), bands of `interval` (e.g. "90% interval").
pub fn survival_figure(subject: &str, time: &Quantity, interval: &str, picture: &SurvivalPicture) -> Result<String, PlotError> {
    check(picture)?;
    let mut entries: Vec<(Key, String)> = picture
        .settings
        .iter()
        .enumerate()
        .map(|(i, s)| (Key::Stroke(series(i), 2.4, i % 2 == 1), s.label.clone()))
        .collect();
    entries.push((Key::Swatch(INK, 0.18), format!("band: {interval}")));
    match picture.mark {
        Some(SurvivalMark::Time(t)) => entries.push((Key::Stroke(INK, 1.0, true), format!("{} = {}", time.name, super::canvas::num(t)))),
        Some(SurvivalMark::Share(q)) => entries.push((Key::Stroke(INK, 1.0, true), format!("a share {} of events", super::canvas::num(q)))),
        None => {}
    }
    let rows = legend_rows(&entries, WIDTH - 100.0);
    let xs = extent(&picture.times).map_or((0.0, 1.0), |(_, hi)| (0.0, hi));
    let survival_y = (0.0, 1.02);
    let hazard_y = padded(0.0, hazard_top(picture), 0.05);
    let left = left_margin(survival_y, true).max(left_margin(hazard_y, true));
    let top = HEADING + 8.0 + legend_height(rows) + 10.0;
    let width = WIDTH - left - 20.0;
    let upper = Frame { left, top, width, height: PANEL, x: xs, y: survival_y };
    let lower = Frame { left, top: upper.bottom() + GAP, width, height: PANEL, x: xs, y: (0.0, hazard_y.1) };
    let height = lower.bottom() + 52.0;
    let labels: Vec<&str> = picture.settings.iter().map(|s| s.label.as_str()).collect();
    let desc = format!(
        "Two panels over {}: the share of units still without the event (top) and the hazard, events per unit of time \
         among those still without one (bottom), for {}; posterior mean lines with {interval} bands. Hazard values \
         above the lower panel's top are drawn at its edge.",
        time.label(),
        labels.join(" and ")
    );
    let mut sheet = Sheet::new(WIDTH, height, "survival curves", subject, &desc);
    legend(&mut sheet, left, HEADING + 8.0, width, &entries);
    let time_title = time.label();
    let survival: Vec<&CurveBand> = picture.settings.iter().map(|s| &s.survival).collect();
    draw_panel(&mut sheet, &upper, &picture.times, &survival, &time_title, "share without the event");
    let hazard_title = match &time.unit {
        Some(u) if !u.is_empty() => format!("hazard (per {u})"),
        _ => "hazard (per unit of time)".to_string(),
    };
    let hazard: Vec<&CurveBand> = picture.settings.iter().map(|s| &s.hazard).collect();
    draw_panel(&mut sheet, &lower, &picture.times, &hazard, &time_title, &hazard_title);
    match picture.mark {
        Some(SurvivalMark::Time(t)) => {
            upper.vertical_reference(&mut sheet, t);
            lower.vertical_reference(&mut sheet, t);
        }
        Some(SurvivalMark::Share(q)) => upper.horizontal_reference(&mut sheet, 1.0 - q),
        None => {}
    }
    Ok(sheet.finish())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn band(v: &[f64]) -> CurveBand {
        CurveBand { mean: v.to_vec(), lower: v.iter().map(|x| x * 0.9).collect(), upper: v.iter().map(|x| x * 1.1).collect() }
    }

    #[test]
    fn draws_both_panels_with_units_and_marks() {
        let times = vec![1.0, 2.0, 3.0];
        let setting = |label: &str, s: &[f64]| SurvivalSetting { label: label.into(), survival: band(s), hazard: band(&[0.2, 0.3, 0.4]) };
        let picture = SurvivalPicture {
            times,
            settings: vec![setting("warmth 25", &[0.9, 0.6, 0.3]), setting("warmth 15", &[0.95, 0.8, 0.6])],
            mark: Some(SurvivalMark::Time(2.5)),
        };
        let svg = survival_figure("warmth 25 vs 15 (sprouting)", &Quantity::with_unit("days", "d"), "90% interval", &picture).unwrap();
        assert!(svg.contains("<title>survival curves: warmth 25 vs 15 (sprouting)</title>"));
        assert!(svg.contains("hazard (per d)") && svg.contains("days (d)") && svg.contains("warmth 15"));
        assert!(svg.contains("stroke-dasharray=\"7 4\"") && svg.contains("stroke-dasharray=\"4 3\""));
    }

    #[test]
    fn a_short_band_is_refused_naming_it() {
        let picture = SurvivalPicture {
            times: vec![1.0, 2.0],
            settings: vec![SurvivalSetting { label: "peat".into(), survival: band(&[0.9]), hazard: band(&[0.1, 0.2]) }],
            mark: None,
        };
        let e = survival_figure("x", &Quantity::new("days"), "90% interval", &picture).unwrap_err().to_string();
        assert!(e.contains("survival mean of peat") && e.contains("1 values but 2"), "{e}");
    }
}
