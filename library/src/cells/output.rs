//! What a statement gives back: displays, warnings and errors.
//!
//! A [`Display`] is one rich result: always `text/plain`, and where it helps
//! `text/html` (tables), `image/svg+xml` (figures) and [`RESULT_MIME`]
//! (a documented JSON structure for programs). [`Grid`] renders the same rows as
//! aligned plain text and as an HTML table so both views say the same thing.

use serde_json::{Map, Value};

/// The MIME type of a result's JSON structure. A vendor type rather than
/// `application/json`: notebook front ends rank their JSON tree viewer above
/// HTML, which would hide the written result from the reader; programs ask
/// for this type by name.
pub const RESULT_MIME: &str = "application/vnd.waypath.result+json";

/// One rich result of a statement.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Display {
    pub plain: String,
    pub html: Option<String>,
    pub svg: Option<String>,
    pub json: Option<Value>,
}

impl Display {
    /// A display with plain text only.
    pub fn text(plain: impl Into<String>) -> Display {
        Display { plain: plain.into(), ..Display::default() }
    }

    /// The MIME bundles a notebook front end should show, in order.
    ///
    /// A front end shows one MIME type per output (its richest), and HTML
    /// outranks SVG, so a display that has both a written result and a
    /// figure becomes two outputs: the written result (plain, HTML, JSON),
    /// then its figure (SVG, with its `<title>` as the plain-text stand-in),
    /// so each figure sits under the statement it belongs to.
    pub fn notebook_bundles(&self) -> Vec<Map<String, Value>> {
        match &self.svg {
            Some(svg) if self.html.is_some() || self.json.is_some() => {
                let text = Display { svg: None, ..self.clone() };
                let figure = Display { plain: figure_caption(svg), svg: Some(svg.clone()), ..Display::default() };
                vec![text.mime_bundle(), figure.mime_bundle()]
            }
            _ => vec![self.mime_bundle()],
        }
    }

    /// The MIME bundle (`{"text/plain": …, "text/html": …}`) of this display.
    fn mime_bundle(&self) -> Map<String, Value> {
        let mut bundle = Map::new();
        bundle.insert("text/plain".into(), Value::String(self.plain.clone()));
        if let Some(html) = &self.html {
            bundle.insert("text/html".into(), Value::String(html.clone()));
        }
        if let Some(svg) = &self.svg {
            bundle.insert("image/svg+xml".into(), Value::String(svg.clone()));
        }
        if let Some(json) = &self.json {
            bundle.insert(RESULT_MIME.into(), json.clone());
        }
        bundle
    }
}

/// `figure: <title>` for an SVG figure, the words a text-only reader gets.
fn figure_caption(svg: &str) -> String {
    let title = svg
        .split_once("<title>")
        .and_then(|(_, rest)| rest.split_once("</title>"))
        .map(|(t, _)| t.trim())
        .filter(|t| !t.is_empty());
    match title {
        Some(t) => format!("figure: {}", unescape_xml(t)),
        None => "figure".to_string(),
    }
}

fn unescape_xml(text: &str) -> String {
    text.replace("&lt;", "<").replace("&gt;", ">").replace("&quot;", "\"").replace("&apos;", "'").replace("&amp;", "&")
}

/// An error that stops a cell, with the cell line it comes from.
#[derive(Debug, Clone, PartialEq)]
pub struct CellError {
    /// 1-based line within the cell, when the error has a place.
    pub line: Option<usize>,
    pub message: String,
}

impl CellError {
    pub fn at(line: usize, message: impl Into<String>) -> CellError {
        CellError { line: Some(line), message: message.into() }
    }

    /// The one-line text a scientist reads.
    pub fn describe(&self) -> String {
        match self.line {
            Some(n) => format!("cell line {n}: {}", self.message),
            None => self.message.clone(),
        }
    }
}

impl std::fmt::Display for CellError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(&self.describe())
    }
}

/// Everything one cell produced: its displays in order, warnings, and the
/// error that stopped it (statements before the error keep their displays).
#[derive(Debug, Clone, Default, PartialEq)]
pub struct CellOutcome {
    pub displays: Vec<Display>,
    pub warnings: Vec<String>,
    pub error: Option<CellError>,
}

/// Rows of labelled cells rendered both as aligned text and as HTML.
#[derive(Debug, Clone, PartialEq)]
pub struct Grid {
    pub headers: Vec<String>,
    pub rows: Vec<Vec<String>>,
    /// Columns whose values are numbers (right-aligned).
    pub numeric: Vec<bool>,
}

impl Grid {
    pub fn new(headers: &[&str]) -> Grid {
        Grid {
            headers: headers.iter().map(|h| h.to_string()).collect(),
            rows: Vec::new(),
            numeric: vec![false; headers.len()],
        }
    }

    /// Mark columns as numeric (right-aligned).
    pub fn numeric_columns(mut self, columns: &[usize]) -> Grid {
        for &c in columns {
            if c < self.numeric.len() {
                self.numeric[c] = true;
            }
        }
        self
    }

    pub fn push(&mut self, row: Vec<String>) {
        self.rows.push(row);
    }

    /// Aligned plain text: header, a thin rule, then rows.
    pub fn to_text(&self) -> String {
        let widths: Vec<usize> = (0..self.headers.len())
            .map(|c| {
                let cells = self.rows.iter().map(|r| r.get(c).map_or(0, |s| s.chars().count()));
                cells.chain(std::iter::once(self.headers[c].chars().count())).max().unwrap_or(0)
            })
            .collect();
        let line = |cells: &[String]| {
            let parts: Vec<String> = widths
                .iter()
                .enumerate()
                .map(|(c, &w)| {
                    let s = cells.get(c).map(String::as_str).unwrap_or("");
                    // Padding by hand: a `{:w$}` width above 65535 panics, and a cell
                    // may hold a path through thousands of nodes.
                    let pad = " ".repeat(w.saturating_sub(s.chars().count()));
                    if self.numeric[c] { format!("{pad}{s}") } else { format!("{s}{pad}") }
                })
                .collect();
            parts.join("  ").trim_end().to_string()
        };
        let mut out = vec![line(&self.headers)];
        out.push(widths.iter().map(|&w| "─".repeat(w)).collect::<Vec<_>>().join("  "));
        out.extend(self.rows.iter().map(|r| line(r)));
        out.join("\n")
    }

    /// An HTML table with the project's own class names.
    pub fn to_html(&self) -> String {
        let mut html = String::from("<table class=\"wp-grid\"><thead><tr>");
        for h in &self.headers {
            html.push_str(&format!("<th>{}</th>", escape_html(h)));
        }
        html.push_str("</tr></thead><tbody>");
        for row in &self.rows {
            html.push_str("<tr>");
            for (c, cell) in row.iter().enumerate() {
                let class = if self.numeric.get(c).copied().unwrap_or(false) { " class=\"wp-num\"" } else { "" };
                html.push_str(&format!("<td{class}>{}</td>", escape_html(cell)));
            }
            html.push_str("</tr>");
        }
        html.push_str("</tbody></table>");
        html
    }
}

/// Escape text for HTML element content and attribute values.
pub fn escape_html(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            _ => out.push(c),
        }
    }
    out
}

/// An HTML block: a heading sentence, then any number of parts.
pub fn html_block(heading: &str, parts: &[String]) -> String {
    let mut html = format!("<div class=\"wp-result\"><p class=\"wp-head\">{}</p>", escape_html(heading));
    for p in parts {
        html.push_str(p);
    }
    html.push_str("</div>");
    html
}

/// A list of sentences as an HTML list.
pub fn html_list(items: &[String]) -> String {
    let mut html = String::from("<ul class=\"wp-notes\">");
    for i in items {
        html.push_str(&format!("<li>{}</li>", escape_html(i)));
    }
    html.push_str("</ul>");
    html
}

#[cfg(test)]
mod tests {
    use super::*;

    // JupyterLab shows the richest MIME type of an output and ranks text/html
    // above image/svg+xml (seen in tests/python/test_browser_lab.py), so a
    // figure must travel alone to be seen.
    #[test]
    fn a_display_with_words_and_a_figure_becomes_words_then_figure() {
        let svg = "<svg><title>mixing: m &amp; n</title></svg>".to_string();
        let d = Display { plain: "m".into(), html: Some("<p>m</p>".into()), svg: Some(svg.clone()), json: None };
        let bundles = d.notebook_bundles();
        assert_eq!(bundles.len(), 2);
        assert_eq!(bundles[0]["text/html"], Value::String("<p>m</p>".into()));
        assert!(!bundles[0].contains_key("image/svg+xml"));
        assert_eq!(bundles[1]["image/svg+xml"], Value::String(svg.clone()));
        assert_eq!(bundles[1]["text/plain"], Value::String("figure: mixing: m & n".into()));
        assert!(!bundles[1].contains_key("text/html"));
        let alone = Display { plain: "f".into(), svg: Some(svg), ..Display::default() };
        assert_eq!(alone.notebook_bundles().len(), 1);
    }

    #[test]
    fn a_grid_cell_longer_than_any_format_width_is_shown_whole() {
        // std::fmt takes widths up to u16::MAX (65,535); this cell is longer.
        let long = "-".repeat(70_000);
        let mut g = Grid::new(&["node", "mechanism"]);
        g.push(vec!["girth".into(), long.clone()]);
        g.push(vec!["yield".into(), "normal(girth, 1)".into()]);
        let text = g.to_text();
        assert!(text.lines().nth(2).unwrap().ends_with(&long));
        assert!(text.lines().nth(3).unwrap().starts_with("yield  normal(girth, 1)"));
    }

    #[test]
    fn grid_aligns_numbers_right_and_text_left() {
        let mut g = Grid::new(&["level", "mean"]).numeric_columns(&[1]);
        g.push(vec!["dwarf".into(), "1.5".into()]);
        g.push(vec!["standard".into(), "12.25".into()]);
        let text = g.to_text();
        let lines: Vec<&str> = text.lines().collect();
        assert_eq!(lines[2], "dwarf       1.5");
        assert_eq!(lines[3], "standard  12.25");
    }

    #[test]
    fn html_escapes_markup_in_cells() {
        let mut g = Grid::new(&["a"]);
        g.push(vec!["x < y & z".into()]);
        assert!(g.to_html().contains("x &lt; y &amp; z"));
    }
}
