//! What a statement gives back: displays, warnings and errors.
//!
//! A [`Display`] is one rich result: always `text/plain`, and where it helps
//! `text/html` (tables), `image/svg+xml` (figures) and `application/json`
//! (a documented structure for programs). [`Grid`] renders the same rows as
//! aligned plain text and as an HTML table so both views say the same thing.

use serde_json::{Map, Value};

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

    /// The MIME bundle (`{"text/plain": …, "text/html": …}`) of this display.
    pub fn mime_bundle(&self) -> Map<String, Value> {
        let mut bundle = Map::new();
        bundle.insert("text/plain".into(), Value::String(self.plain.clone()));
        if let Some(html) = &self.html {
            bundle.insert("text/html".into(), Value::String(html.clone()));
        }
        if let Some(svg) = &self.svg {
            bundle.insert("image/svg+xml".into(), Value::String(svg.clone()));
        }
        if let Some(json) = &self.json {
            bundle.insert("application/json".into(), json.clone());
        }
        bundle
    }
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
                    if self.numeric[c] { format!("{s:>w$}") } else { format!("{s:<w$}") }
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
