//! The drawing kit shared by every figure: a sheet (the root `<svg>` with its
//! `<title>` and `<desc>`), panels that map data to pixels, axes with round
//! tick values, legends, and compact path data.
//!
//! Coordinates are written with one decimal and lines are merged into single
//! `<path>` elements so that figures built from thousands of draws stay small.

use svg::node::element::Element;
use svg::node::{Text as TextNode, Value};
use svg::Node;

use super::palette::INK;

/// Font size of tick labels and legend entries, in pixels.
pub const SMALL: f64 = 12.0;
/// Font size of axis titles and node labels.
pub const MEDIUM: f64 = 13.0;
/// Font size of the visible heading.
pub const LARGE: f64 = 15.0;
/// Default figure width in pixels.
pub const WIDTH: f64 = 640.0;

/// A number rounded to one decimal, without a trailing `.0`.
pub fn num(v: f64) -> String {
    let r = (v * 10.0).round() / 10.0;
    if r == r.trunc() {
        format!("{}", r as i64)
    } else {
        format!("{r:.1}")
    }
}

/// Estimated advance width of `s` at font size `size`, in pixels.
///
/// Per-character widths (in ems) follow a wide sans-serif face, so the
/// estimate errs on the generous side for narrower faces.
pub fn text_width(s: &str, size: f64) -> f64 {
    let em: f64 = s
        .chars()
        .map(|c| match c {
            'i' | 'j' | 'l' | '|' | '!' | '.' | ',' | ':' | ';' | '\'' | 'I' => 0.30,
            ' ' => 0.33,
            'f' | 'r' | 't' | '(' | ')' | '[' | ']' | '{' | '}' | '-' | '/' => 0.42,
            'm' | 'w' | 'M' | 'W' => 0.98,
            '0'..='9' => 0.64,
            'a'..='z' => 0.63,
            'A'..='Z' => 0.76,
            '_' | '=' | '+' | '<' | '>' | '~' | '*' | '#' | '%' | '&' => 0.84,
            _ => 0.90,
        })
        .sum();
    em * size
}

/// `s` shortened with a closing `…` so that its estimated width at `size`
/// stays within `max` pixels (unchanged when it fits). Figures write the
/// full text in their `<desc>` or beside the figure.
pub fn clip_to_width(s: &str, size: f64, max: f64) -> String {
    if text_width(s, size) <= max {
        return s.to_string();
    }
    let budget = max - text_width("…", size);
    let mut out = String::new();
    let mut used = 0.0;
    for c in s.chars() {
        let w = text_width(&c.to_string(), size);
        if used + w > budget {
            break;
        }
        used += w;
        out.push(c);
    }
    format!("{}…", out.trim_end())
}

/// Builder methods on a bare SVG element.
pub trait Attr: Sized {
    /// Set an attribute and return the element.
    fn with(self, name: &str, value: impl Into<Value>) -> Self;
}

impl Attr for Element {
    fn with(mut self, name: &str, value: impl Into<Value>) -> Self {
        self.assign(name, value);
        self
    }
}

/// A straight line.
pub fn line(x1: f64, y1: f64, x2: f64, y2: f64, stroke: &str, width: f64) -> Element {
    Element::new("line")
        .with("x1", num(x1))
        .with("y1", num(y1))
        .with("x2", num(x2))
        .with("y2", num(y2))
        .with("stroke", stroke)
        .with("stroke-width", num(width.max(0.1)))
}

/// A filled rectangle from its top-left corner.
pub fn rect(x: f64, y: f64, w: f64, h: f64, fill: &str) -> Element {
    Element::new("rect")
        .with("x", num(x))
        .with("y", num(y))
        .with("width", num(w.max(0.0)))
        .with("height", num(h.max(0.0)))
        .with("fill", fill)
}

/// A circle.
pub fn circle(cx: f64, cy: f64, r: f64, fill: &str) -> Element {
    Element::new("circle")
        .with("cx", num(cx))
        .with("cy", num(cy))
        .with("r", num(r))
        .with("fill", fill)
}

/// A stroked path with no fill.
pub fn stroke_path(d: String, stroke: &str, width: f64) -> Element {
    Element::new("path")
        .with("d", d)
        .with("fill", "none")
        .with("stroke", stroke)
        .with("stroke-width", num(width.max(0.1)))
        .with("stroke-linejoin", "round")
}

/// A filled path with no outline.
pub fn fill_path(d: String, fill: &str, opacity: f64) -> Element {
    let e = Element::new("path").with("d", d).with("fill", fill);
    if opacity < 1.0 {
        e.with("fill-opacity", format!("{opacity:.2}"))
    } else {
        e
    }
}

/// Horizontal alignment of a text anchor point.
#[derive(Clone, Copy)]
pub enum Anchor {
    Start,
    Middle,
    End,
}

/// Text with its baseline at `y`.
pub fn text(x: f64, y: f64, s: &str, size: f64, anchor: Anchor) -> Element {
    let a = match anchor {
        Anchor::Start => "start",
        Anchor::Middle => "middle",
        Anchor::End => "end",
    };
    let mut e = Element::new("text")
        .with("x", num(x))
        .with("y", num(y))
        .with("font-size", num(size))
        .with("fill", INK);
    if !matches!(anchor, Anchor::Start) {
        e = e.with("text-anchor", a);
    }
    e.append(TextNode::new(s));
    e
}

/// Path data for a polyline through `points`; non-finite points break the line.
pub fn polyline_d(points: impl IntoIterator<Item = (f64, f64)>) -> String {
    let mut d = String::new();
    let mut pen_down = false;
    for (x, y) in points {
        if !(x.is_finite() && y.is_finite()) {
            pen_down = false;
            continue;
        }
        if pen_down {
            d.push(' ');
        } else {
            d.push('M');
        }
        d.push_str(&num(x));
        d.push(',');
        d.push_str(&num(y));
        pen_down = true;
    }
    d
}

/// Path data for a closed polygon through `points`.
pub fn polygon_d(points: impl IntoIterator<Item = (f64, f64)>) -> String {
    let mut d = polyline_d(points);
    if !d.is_empty() {
        d.push('Z');
    }
    d
}

/// Round tick values covering `[lo, hi]`, about `target` of them.
///
/// Steps are 1, 2 or 5 times a power of ten, the "nice numbers" rule of
/// Heckbert (1990, Graphics Gems, "Nice numbers for graph labels").
pub fn ticks(lo: f64, hi: f64, target: usize) -> (Vec<f64>, f64) {
    let span = (hi - lo).abs().max(f64::MIN_POSITIVE);
    let rough = span / target.max(2) as f64;
    let power = 10f64.powf(rough.log10().floor());
    let step = [1.0, 2.0, 5.0, 10.0]
        .iter()
        .map(|m| m * power)
        .find(|s| *s >= rough)
        .unwrap_or(10.0 * power);
    let first = (lo / step).ceil() as i64;
    let last = (hi / step).floor() as i64;
    let values = (first..=last).map(|k| k as f64 * step).collect();
    (values, step)
}

/// Ticks for an axis `width` pixels long: about `target`, but at least
/// three where their labels fit side by side (a lone tick gives no scale).
pub fn axis_ticks(x: (f64, f64), target: usize, width: f64) -> (Vec<f64>, f64) {
    let first = ticks(x.0, x.1, target);
    let fits = |(values, step): &(Vec<f64>, f64)| {
        let widest = values.iter().map(|v| text_width(&tick_label(*v, *step), SMALL)).fold(0.0, f64::max);
        (widest + 8.0) * values.len() as f64 <= width
    };
    if first.0.len() >= 3 {
        return first;
    }
    (target + 1..target + 12).map(|t| ticks(x.0, x.1, t)).find(|c| c.0.len() >= 3 && fits(c)).unwrap_or(first)
}

/// A tick value written with as many decimals as its step needs.
pub fn tick_label(v: f64, step: f64) -> String {
    let decimals = (-step.log10().floor()).clamp(0.0, 6.0) as usize;
    let s = format!("{:.*}", decimals, v);
    let s = if s
        .trim_start_matches('-')
        .chars()
        .all(|c| c == '0' || c == '.')
    {
        s.trim_start_matches('-').to_string()
    } else {
        s
    };
    s.replace('-', "\u{2212}")
}

/// `[lo, hi]` widened by `frac` of its span on each side; a single value
/// gets a unit-sized window around it.
pub fn padded(lo: f64, hi: f64, frac: f64) -> (f64, f64) {
    if !(lo.is_finite() && hi.is_finite()) {
        return (0.0, 1.0);
    }
    let span = hi - lo;
    if span <= 1e-12 * lo.abs().max(1.0) {
        let half = (lo.abs() * 0.1).max(0.5);
        return (lo - half, hi + half);
    }
    (lo - frac * span, hi + frac * span)
}

/// Smallest and largest finite value of a series of numbers.
pub fn extent<'a>(values: impl IntoIterator<Item = &'a f64>) -> Option<(f64, f64)> {
    values
        .into_iter()
        .filter(|v| v.is_finite())
        .fold(None, |acc, &v| match acc {
            None => Some((v, v)),
            Some((lo, hi)) => Some((lo.min(v), hi.max(v))),
        })
}

/// The root `<svg>` of one figure, opened with its `<title>` and `<desc>`,
/// a white background and a visible heading.
pub struct Sheet {
    root: Element,
}

/// Vertical space taken by the heading at the top of every figure.
pub const HEADING: f64 = 30.0;

impl Sheet {
    /// Open a figure titled `"{kind}: {subject}"` with the sentence `desc`.
    pub fn new(width: f64, height: f64, kind: &str, subject: &str, desc: &str) -> Sheet {
        let heading = format!("{kind}: {subject}");
        let mut root = Element::new("svg")
            .with("xmlns", "http://www.w3.org/2000/svg")
            .with("width", num(width))
            .with("height", num(height))
            .with("viewBox", format!("0 0 {} {}", num(width), num(height)))
            .with("font-family", "sans-serif");
        let mut title = Element::new("title");
        title.append(TextNode::new(heading.clone()));
        let mut description = Element::new("desc");
        description.append(TextNode::new(desc));
        root.append(title);
        root.append(description);
        root.append(rect(0.0, 0.0, width, height, "#FFFFFF"));
        // bold text runs wider than the estimate's regular face: keep a tenth in hand
        let shown = clip_to_width(&heading, LARGE * 1.1, width - 24.0);
        root.append(text(12.0, 21.0, &shown, LARGE, Anchor::Start).with("font-weight", "bold"));
        Sheet { root }
    }

    /// Add an element on top of what is drawn so far.
    pub fn push(&mut self, e: Element) {
        self.root.append(e);
    }

    /// The finished SVG text.
    pub fn finish(self) -> String {
        self.root.to_string()
    }
}

/// One panel: a pixel rectangle and the data window it shows.
#[derive(Clone, Copy, Debug)]
pub struct Frame {
    pub left: f64,
    pub top: f64,
    pub width: f64,
    pub height: f64,
    pub x: (f64, f64),
    pub y: (f64, f64),
}

/// Width needed left of a panel for its y tick labels and, if any, a y title.
pub fn left_margin(y: (f64, f64), titled: bool) -> f64 {
    let (values, step) = ticks(y.0, y.1, 5);
    let labels = values
        .iter()
        .map(|v| text_width(&tick_label(*v, step), SMALL))
        .fold(0.0, f64::max);
    labels + 14.0 + if titled { 24.0 } else { 6.0 }
}

impl Frame {
    /// Pixel column of data value `v`.
    pub fn px(&self, v: f64) -> f64 {
        self.left + (v - self.x.0) / (self.x.1 - self.x.0) * self.width
    }

    /// Pixel row of data value `v` (up is larger).
    pub fn py(&self, v: f64) -> f64 {
        self.top + self.height - (v - self.y.0) / (self.y.1 - self.y.0) * self.height
    }

    /// Bottom of the panel in pixels.
    pub fn bottom(&self) -> f64 {
        self.top + self.height
    }

    /// Right edge of the panel in pixels.
    pub fn right(&self) -> f64 {
        self.left + self.width
    }

    /// A bottom axis with ticks, labels and an optional title below.
    pub fn x_axis(&self, sheet: &mut Sheet, title: Option<&str>) {
        let base = self.bottom();
        let target = ((self.width / 80.0).round() as usize).clamp(2, 8);
        let (values, step) = axis_ticks(self.x, target, self.width);
        let mut marks = String::new();
        for v in &values {
            let x = self.px(*v);
            marks.push_str(&format!("M{},{}v4", num(x), num(base)));
            sheet.push(text(
                x,
                base + 17.0,
                &tick_label(*v, step),
                SMALL,
                Anchor::Middle,
            ));
        }
        sheet.push(line(self.left, base, self.right(), base, INK, 0.8));
        sheet.push(stroke_path(marks, INK, 0.8));
        if let Some(t) = title {
            let cx = self.left + self.width / 2.0;
            sheet.push(text(cx, base + 36.0, &clip_to_width(t, MEDIUM, self.width), MEDIUM, Anchor::Middle));
        }
    }

    /// A left axis with ticks, labels and an optional rotated title.
    pub fn y_axis(&self, sheet: &mut Sheet, title: Option<&str>) {
        let target = ((self.height / 50.0).round() as usize).clamp(3, 6);
        let (values, step) = ticks(self.y.0, self.y.1, target);
        let mut marks = String::new();
        let mut widest: f64 = 0.0;
        for v in &values {
            let y = self.py(*v);
            marks.push_str(&format!("M{},{}h-4", num(self.left), num(y)));
            let label = tick_label(*v, step);
            widest = widest.max(text_width(&label, SMALL));
            sheet.push(text(self.left - 7.0, y + 4.0, &label, SMALL, Anchor::End));
        }
        sheet.push(line(
            self.left,
            self.top,
            self.left,
            self.bottom(),
            INK,
            0.8,
        ));
        sheet.push(stroke_path(marks, INK, 0.8));
        if let Some(t) = title {
            let x = self.left - widest - 16.0;
            let y = self.top + self.height / 2.0;
            sheet.push(
                text(x, y, &clip_to_width(t, MEDIUM, self.height), MEDIUM, Anchor::Middle)
                    .with("transform", format!("rotate(-90 {} {})", num(x), num(y))),
            );
        }
    }

    /// A dashed vertical reference line at data value `x`, if inside the window.
    pub fn vertical_reference(&self, sheet: &mut Sheet, x: f64) {
        if x > self.x.0 && x < self.x.1 {
            let p = self.px(x);
            sheet.push(
                line(p, self.top, p, self.bottom(), INK, 1.0).with("stroke-dasharray", "4 3"),
            );
        }
    }

    /// A dashed horizontal reference line at data value `y`, if inside the window.
    pub fn horizontal_reference(&self, sheet: &mut Sheet, y: f64) {
        if y > self.y.0 && y < self.y.1 {
            let p = self.py(y);
            sheet.push(
                line(self.left, p, self.right(), p, INK, 1.0).with("stroke-dasharray", "4 3"),
            );
        }
    }

    /// Path data of a curve given in data units.
    pub fn curve_d(&self, xs: &[f64], ys: &[f64]) -> String {
        polyline_d(xs.iter().zip(ys).map(|(x, y)| (self.px(*x), self.py(*y))))
    }

    /// Path data of the band between `lower` and `upper` over `xs`.
    pub fn band_d(&self, xs: &[f64], lower: &[f64], upper: &[f64]) -> String {
        let top = xs
            .iter()
            .zip(upper)
            .map(|(x, y)| (self.px(*x), self.py(*y)));
        let bottom = xs
            .iter()
            .zip(lower)
            .rev()
            .map(|(x, y)| (self.px(*x), self.py(*y)));
        polygon_d(top.chain(bottom))
    }
}

/// The mark drawn beside a legend entry.
#[derive(Clone, Copy)]
pub enum Key {
    /// A filled square of the colour at the given opacity.
    Swatch(&'static str, f64),
    /// A short line of the colour and width, dashed or solid.
    Stroke(&'static str, f64, bool),
    /// A dot, filled or open.
    Dot(&'static str, bool),
    /// A diamond.
    Diamond(&'static str),
    /// A box outline of the colour and width, with a tint, dashed or solid.
    Outline(&'static str, f64, bool),
    /// A band of the colour and width with a thin white line down its middle.
    Cased(&'static str, f64),
    /// A short line of the colour and width in a dash pattern (`""`: solid).
    Pattern(&'static str, f64, &'static str),
}

const KEY_WIDTH: f64 = 22.0;
const LEGEND_ROW: f64 = 18.0;

fn entry_width(label: &str) -> f64 {
    KEY_WIDTH + 6.0 + text_width(label, SMALL) + 16.0
}

/// Number of rows a legend takes when it may be `max_width` wide.
pub fn legend_rows(entries: &[(Key, String)], max_width: f64) -> usize {
    let mut rows = usize::from(!entries.is_empty());
    let mut used = 0.0;
    for (_, label) in entries {
        let w = entry_width(label);
        if used > 0.0 && used + w > max_width {
            rows += 1;
            used = 0.0;
        }
        used += w;
    }
    rows
}

/// Height in pixels of a legend of `rows` rows.
pub fn legend_height(rows: usize) -> f64 {
    rows as f64 * LEGEND_ROW
}

/// Draw a legend flowing left to right from `(x, y)` (top of the first row).
pub fn legend(sheet: &mut Sheet, x: f64, y: f64, max_width: f64, entries: &[(Key, String)]) {
    let mut group = Element::new("g").with("class", "legend");
    let mut cx = x;
    let mut row_top = y;
    for (key, label) in entries {
        let w = entry_width(label);
        if cx > x && cx - x + w > max_width {
            cx = x;
            row_top += LEGEND_ROW;
        }
        let mid = row_top + LEGEND_ROW / 2.0;
        group.append(key_mark(*key, cx, mid));
        group.append(text(
            cx + KEY_WIDTH + 6.0,
            mid + 4.0,
            label,
            SMALL,
            Anchor::Start,
        ));
        cx += w;
    }
    sheet.push(group);
}

fn key_mark(key: Key, x: f64, mid: f64) -> Element {
    match key {
        Key::Swatch(colour, opacity) => {
            let r = rect(x + 4.0, mid - 6.0, 14.0, 12.0, colour);
            if opacity < 1.0 {
                r.with("fill-opacity", format!("{opacity:.2}"))
            } else {
                r
            }
        }
        Key::Stroke(colour, width, dashed) => {
            let l = line(x, mid, x + KEY_WIDTH, mid, colour, width);
            if dashed {
                l.with("stroke-dasharray", "4 3")
            } else {
                l
            }
        }
        Key::Dot(colour, filled) => {
            let c = circle(
                x + KEY_WIDTH / 2.0,
                mid,
                4.5,
                if filled { colour } else { "#FFFFFF" },
            );
            c.with("stroke", colour).with("stroke-width", "1.5")
        }
        Key::Diamond(colour) => diamond(x + KEY_WIDTH / 2.0, mid, 5.5, colour),
        Key::Pattern(colour, width, dashes) => {
            let l = line(x, mid, x + KEY_WIDTH, mid, colour, width);
            if dashes.is_empty() {
                l
            } else {
                l.with("stroke-dasharray", dashes)
            }
        }
        Key::Cased(colour, width) => {
            let mut g = Element::new("g");
            g.append(line(x, mid, x + KEY_WIDTH, mid, colour, width));
            g.append(line(x, mid, x + KEY_WIDTH, mid, "#FFFFFF", 1.6));
            g
        }
        Key::Outline(colour, width, dashed) => {
            let r = rect(x + 1.0, mid - 7.0, KEY_WIDTH - 2.0, 14.0, colour)
                .with("fill-opacity", "0.18")
                .with("stroke", colour)
                .with("stroke-width", num(width))
                .with("rx", "3");
            if dashed {
                r.with("stroke-dasharray", "4 2")
            } else {
                r
            }
        }
    }
}

/// A filled diamond of half-diagonal `r` centred on `(x, y)`.
pub fn diamond(x: f64, y: f64, r: f64, colour: &str) -> Element {
    fill_path(
        polygon_d([(x, y - r), (x + r, y), (x, y + r), (x - r, y)]),
        colour,
        1.0,
    )
}

/// A light grey dot cloud, one path of tiny squares (small even for many points).
pub fn dot_cloud(frame: &Frame, points: &[(f64, f64)], colour: &str) -> Element {
    let mut d = String::new();
    for (x, y) in points {
        if x.is_finite() && y.is_finite() {
            let (px, py) = (frame.px(*x), frame.py(*y));
            d.push_str(&format!("M{},{}h3v3h-3z", num(px - 1.5), num(py - 1.5)));
        }
    }
    fill_path(d, colour, 0.55)
}
