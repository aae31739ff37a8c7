//! Cutting a cell into statements.
//!
//! The rules are deliberately few so they are easy to predict: a line that
//! starts at column 0 begins a statement; a header that ends with `:` owns
//! the indented lines below it; `#` outside quotes starts a comment.

use super::output::CellError;

/// One line of a cell, with its 1-based line number within the cell.
#[derive(Debug, Clone, PartialEq)]
pub struct SourceLine {
    pub number: usize,
    pub text: String,
}

/// A header line and its (possibly empty) indented body.
#[derive(Debug, Clone, PartialEq)]
pub struct Statement {
    pub header: SourceLine,
    pub body: Vec<SourceLine>,
}

impl Statement {
    /// The header without its trailing `:`.
    pub fn head(&self) -> &str {
        self.header.text.trim_end_matches(':').trim_end()
    }

    /// Whether the header announced a body with a trailing `:`.
    pub fn expects_body(&self) -> bool {
        self.header.text.ends_with(':')
    }
}

/// Remove a `#` comment that is not inside double quotes.
pub fn strip_comment(line: &str) -> &str {
    let mut in_quotes = false;
    for (i, c) in line.char_indices() {
        match c {
            '"' => in_quotes = !in_quotes,
            '#' if !in_quotes => return &line[..i],
            _ => {}
        }
    }
    line
}

/// Split a cell into statements. Errors name the cell line.
pub fn split_statements(cell: &str) -> Result<Vec<Statement>, CellError> {
    let mut statements: Vec<Statement> = Vec::new();
    for (i, raw) in cell.lines().enumerate() {
        let number = i + 1;
        let code = strip_comment(raw).trim_end();
        if code.trim().is_empty() {
            continue;
        }
        let indented = code.starts_with(' ') || code.starts_with('\t');
        let line = SourceLine { number, text: code.trim().to_string() };
        if !indented {
            statements.push(Statement { header: line, body: Vec::new() });
            continue;
        }
        match statements.last_mut() {
            Some(st) if st.expects_body() => st.body.push(line),
            Some(st) => {
                return Err(CellError::at(
                    number,
                    format!(
                        "this line is indented, but the statement above it (line {}) takes no body; \
                         end that header with ':' or remove the indentation",
                        st.header.number
                    ),
                ))
            }
            None => {
                return Err(CellError::at(
                    number,
                    "a cell cannot start with an indented line; start the statement at the left margin",
                ))
            }
        }
    }
    Ok(statements)
}

/// Whether the cell so far is complete (for the kernel's `is_complete`):
/// a header ending with `:` with no body yet, or a last line still indented
/// inside a body, means more is expected.
pub fn is_incomplete(cell: &str) -> bool {
    let lines: Vec<&str> = cell.lines().map(|l| strip_comment(l).trim_end()).collect();
    let last = lines.iter().rev().find(|l| !l.trim().is_empty());
    match last {
        Some(l) => l.ends_with(':') || (cell.ends_with('\n') && (l.starts_with(' ') || l.starts_with('\t')) && !cell.ends_with("\n\n")),
        None => false,
    }
}

/// Split `s` at top-level commas (not inside parentheses or quotes), trimming each part.
pub fn split_commas(s: &str) -> Vec<String> {
    let mut parts = Vec::new();
    let mut depth = 0i32;
    let mut in_quotes = false;
    let mut current = String::new();
    for c in s.chars() {
        match c {
            '"' => in_quotes = !in_quotes,
            '(' | '[' if !in_quotes => depth += 1,
            ')' | ']' if !in_quotes => depth -= 1,
            ',' if depth == 0 && !in_quotes => {
                parts.push(current.trim().to_string());
                current.clear();
                continue;
            }
            _ => {}
        }
        current.push(c);
    }
    if !current.trim().is_empty() {
        parts.push(current.trim().to_string());
    }
    parts
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn body_lines_belong_to_the_header_above() {
        let cell = "graph g:\n    a -> b  # edge\n\n    b -> c\nask total effect of a on c in g\n";
        let st = split_statements(cell).unwrap();
        assert_eq!(st.len(), 2);
        assert_eq!(st[0].head(), "graph g");
        assert_eq!(st[0].body.iter().map(|l| l.text.as_str()).collect::<Vec<_>>(), ["a -> b", "b -> c"]);
        assert_eq!(st[0].body[1].number, 4);
        assert_eq!(st[1].header.number, 5);
    }

    #[test]
    fn indented_line_under_bodiless_header_names_both_lines() {
        let err = split_statements("paths from a to b in g\n  oops\n").unwrap_err();
        assert_eq!(err.line, Some(2));
        assert!(err.message.contains("line 1"), "{}", err.message);
    }

    #[test]
    fn comment_marks_inside_quotes_are_kept() {
        assert_eq!(strip_comment(r#"table t from "a#b.csv" # note"#), r#"table t from "a#b.csv" "#);
    }

    #[test]
    fn open_header_is_incomplete() {
        assert!(is_incomplete("graph g:"));
        assert!(is_incomplete("graph g:\n    a -> b\n"));
        assert!(!is_incomplete("paths from a to b in g"));
        assert!(!is_incomplete("graph g:\n    a -> b\n\n"));
    }

    #[test]
    fn commas_inside_parentheses_do_not_split() {
        assert_eq!(split_commas("rootstock, spline(age, 8), girth"), ["rootstock", "spline(age, 8)", "girth"]);
    }
}
