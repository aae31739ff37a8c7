//! Row conditions for `keep where`: parsing, canonical text, evaluation.
//!
//! A condition compares one column with a number or a level name
//! (`< <= > >= = !=`), and comparisons combine with `and`, `or`, `not` and
//! parentheses (`not` binds tightest, then `and`, then `or`). Parsing needs
//! no table; names are checked against the table only when the condition is
//! evaluated, so the error can list the columns and levels that do exist.

use std::fmt;

use super::error::TableError;
use super::suggest::{join_words, near_matches};
use super::{ColumnData, Table};

/// The words that join comparisons.
pub const AND: &str = "and";
pub const OR: &str = "or";
/// The word that negates a condition.
pub const NOT: &str = "not";
/// The deepest a condition may nest: parentheses, `not`, and every
/// comparison joined by `and` / `or` each add one level. Evaluating,
/// printing and dropping a condition recurse this deep, so the limit keeps a
/// hostile line from overflowing the stack.
pub const MAX_CONDITION_DEPTH: usize = 200;

/// A comparison operator.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
pub enum Comparison {
    Less,
    LessOrEqual,
    Greater,
    GreaterOrEqual,
    Equal,
    NotEqual,
}

impl Comparison {
    /// Every comparison, in the order completion offers their symbols.
    pub const ALL: [Comparison; 6] = [
        Comparison::Equal,
        Comparison::NotEqual,
        Comparison::Less,
        Comparison::LessOrEqual,
        Comparison::Greater,
        Comparison::GreaterOrEqual,
    ];

    /// The operator as written in a cell.
    pub fn symbol(self) -> &'static str {
        match self {
            Comparison::Less => "<",
            Comparison::LessOrEqual => "<=",
            Comparison::Greater => ">",
            Comparison::GreaterOrEqual => ">=",
            Comparison::Equal => "=",
            Comparison::NotEqual => "!=",
        }
    }

    fn holds(self, left: f64, right: f64) -> bool {
        match self {
            Comparison::Less => left < right,
            Comparison::LessOrEqual => left <= right,
            Comparison::Greater => left > right,
            Comparison::GreaterOrEqual => left >= right,
            Comparison::Equal => left == right,
            Comparison::NotEqual => left != right,
        }
    }

    fn is_equality(self) -> bool {
        matches!(self, Comparison::Equal | Comparison::NotEqual)
    }
}

/// The right-hand side of a comparison.
#[derive(Debug, Clone, PartialEq)]
pub enum Literal {
    /// A finite number, with its text as written (a category level may look
    /// like a number, e.g. `2019`).
    Number { value: f64, text: String },
    /// A name: a level label, or a binary word such as `yes`.
    Word(String),
}

impl Literal {
    /// The literal's text as written.
    pub fn text(&self) -> &str {
        match self {
            Literal::Number { text, .. } => text,
            Literal::Word(word) => word,
        }
    }
}

/// A `keep where` condition.
#[derive(Debug, Clone, PartialEq)]
pub enum Condition {
    /// `column op value`.
    Compare { column: String, op: Comparison, value: Literal },
    Not(Box<Condition>),
    And(Box<Condition>, Box<Condition>),
    Or(Box<Condition>, Box<Condition>),
}

impl Condition {
    /// Parses a condition such as `girth > 0 and not (rootstock = dwarf)`.
    ///
    /// The error is the problem alone, phrased to follow the line it came
    /// from; [`super::parse_table_line`] adds the line.
    pub fn parse(text: &str) -> Result<Condition, String> {
        let tokens = tokenize(text)?;
        if tokens.is_empty() {
            return Err("\"keep where\" needs a condition, e.g. keep where girth > 0".into());
        }
        let mut parser = Parser { tokens: &tokens, at: 0, nesting: 0 };
        let (condition, _) = parser.or_expression()?;
        match parser.peek() {
            None => Ok(condition),
            Some(Token::RightParen) => Err("there is a \")\" without a matching \"(\"".into()),
            Some(token) => Err(format!(
                "unexpected {} after \"{condition}\" (join comparisons with and / or)",
                token.describe()
            )),
        }
    }

    /// The column names the condition mentions, in order of appearance.
    pub fn columns(&self) -> Vec<&str> {
        match self {
            Condition::Compare { column, .. } => vec![column.as_str()],
            Condition::Not(inner) => inner.columns(),
            Condition::And(a, b) | Condition::Or(a, b) => {
                let mut names = a.columns();
                names.extend(b.columns());
                names
            }
        }
    }

    /// Which rows of `table` satisfy the condition. `file` names the table's
    /// source in errors.
    pub fn mask(&self, table: &Table, file: &str) -> Result<Vec<bool>, TableError> {
        let whole = self.to_string();
        self.evaluate(table, &Context { file, condition: &whole })
    }

    fn evaluate(&self, table: &Table, context: &Context) -> Result<Vec<bool>, TableError> {
        match self {
            Condition::Compare { column, op, value } => compare(table, column, *op, value, context),
            Condition::Not(inner) => {
                Ok(inner.evaluate(table, context)?.into_iter().map(|b| !b).collect())
            }
            Condition::And(a, b) => {
                let (a, b) = (a.evaluate(table, context)?, b.evaluate(table, context)?);
                Ok(a.iter().zip(&b).map(|(x, y)| *x && *y).collect())
            }
            Condition::Or(a, b) => {
                let (a, b) = (a.evaluate(table, context)?, b.evaluate(table, context)?);
                Ok(a.iter().zip(&b).map(|(x, y)| *x || *y).collect())
            }
        }
    }

    /// Binding strength, for printing parentheses only where needed.
    fn precedence(&self) -> u8 {
        match self {
            Condition::Or(..) => 1,
            Condition::And(..) => 2,
            Condition::Not(..) => 3,
            Condition::Compare { .. } => 4,
        }
    }

    fn write_at(&self, f: &mut fmt::Formatter<'_>, least: u8) -> fmt::Result {
        let bracket = self.precedence() < least;
        if bracket {
            f.write_str("(")?;
        }
        match self {
            Condition::Compare { column, op, value } => {
                write!(f, "{} {} ", quote_if_needed(column), op.symbol())?;
                match value {
                    Literal::Number { text, .. } => f.write_str(text)?,
                    Literal::Word(word) => f.write_str(&quote_if_needed(word))?,
                }
            }
            Condition::Not(inner) => {
                f.write_str("not ")?;
                inner.write_at(f, 3)?;
            }
            Condition::And(a, b) => {
                a.write_at(f, 2)?;
                f.write_str(" and ")?;
                b.write_at(f, 3)?;
            }
            Condition::Or(a, b) => {
                a.write_at(f, 1)?;
                f.write_str(" or ")?;
                b.write_at(f, 2)?;
            }
        }
        if bracket {
            f.write_str(")")?;
        }
        Ok(())
    }
}

/// Canonical text: the condition as it would be written in a cell, with
/// parentheses only where the grouping needs them.
impl fmt::Display for Condition {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        self.write_at(f, 0)
    }
}

/// Where a condition is being evaluated, for error messages.
struct Context<'a> {
    file: &'a str,
    condition: &'a str,
}

impl Context<'_> {
    fn mismatch(&self, problem: String) -> TableError {
        TableError::ConditionMismatch {
            file: self.file.into(),
            condition: self.condition.into(),
            problem: problem.into(),
        }
    }
}

fn compare(
    table: &Table,
    name: &str,
    op: Comparison,
    value: &Literal,
    context: &Context,
) -> Result<Vec<bool>, TableError> {
    let Some(column) = table.column(name) else {
        let names = table.column_names();
        return Err(TableError::UnknownConditionColumn {
            file: context.file.into(),
            condition: context.condition.into(),
            column: name.into(),
            near: near_matches(name, names.iter().copied()),
            columns: names.iter().map(|s| s.to_string()).collect(),
        });
    };
    match &column.data {
        ColumnData::Real(values) => {
            let target = number_for(name, "real", value, context)?;
            Ok(values.iter().map(|&x| op.holds(x, target)).collect())
        }
        ColumnData::Count(values) => {
            let target = number_for(name, "count", value, context)?;
            Ok(values.iter().map(|&x| op.holds(x as f64, target)).collect())
        }
        ColumnData::Binary(values) => {
            let target = binary_for(name, value, context)?;
            Ok(values.iter().map(|&b| op.holds(f64::from(u8::from(b)), target)).collect())
        }
        ColumnData::Category { codes, levels } => {
            if !op.is_equality() {
                return Err(context.mismatch(format!(
                    "{name} is a category column, so compare it with = or != and one of its levels ({})",
                    join_words(levels, "or")
                )));
            }
            let wanted = value.text();
            let Some(code) = levels.iter().position(|l| l == wanted) else {
                return Err(TableError::UnknownConditionLevel {
                    file: context.file.into(),
                    condition: context.condition.into(),
                    column: name.into(),
                    level: wanted.into(),
                    near: near_matches(wanted, levels.iter().map(String::as_str)),
                    levels: levels.clone(),
                });
            };
            let code = code as u32;
            let keep_equal = op == Comparison::Equal;
            Ok(codes.iter().map(|&c| (c == code) == keep_equal).collect())
        }
    }
}

fn number_for(name: &str, kind: &str, value: &Literal, context: &Context) -> Result<f64, TableError> {
    match value {
        Literal::Number { value, .. } => Ok(*value),
        Literal::Word(word) => Err(context.mismatch(format!(
            "{name} is a {kind} column, so compare it with a number, not \"{word}\" (e.g. {name} > 0)"
        ))),
    }
}

fn binary_for(name: &str, value: &Literal, context: &Context) -> Result<f64, TableError> {
    let as_bool = match value {
        Literal::Number { value, .. } if *value == 0.0 => Some(false),
        Literal::Number { value, .. } if *value == 1.0 => Some(true),
        Literal::Number { .. } => None,
        Literal::Word(word) => super::values::parse_binary(word),
    };
    match as_bool {
        Some(b) => Ok(f64::from(u8::from(b))),
        None => Err(context.mismatch(format!(
            "{name} is a binary column, so compare it with yes or no (or 1 or 0), not \"{}\"",
            value.text()
        ))),
    }
}

/// Writes a name in double quotes when it would not read back as one word.
fn quote_if_needed(name: &str) -> String {
    let plain = !name.is_empty()
        && ![AND, OR, NOT].contains(&name)
        && name.chars().all(|c| !c.is_whitespace() && !SPECIAL.contains(&c));
    if plain {
        name.to_string()
    } else {
        format!("\"{name}\"")
    }
}

/// Characters that end a bare word in a condition.
const SPECIAL: [char; 6] = ['(', ')', '<', '>', '=', '!'];

#[derive(Debug, Clone, PartialEq)]
enum Token {
    /// A bare or quoted name; `quoted` names are never keywords.
    Word { text: String, quoted: bool },
    Number { value: f64, text: String },
    Op(Comparison),
    LeftParen,
    RightParen,
    And,
    Or,
    Not,
}

impl Token {
    fn describe(&self) -> String {
        match self {
            Token::Word { text, .. } => format!("\"{text}\""),
            Token::Number { text, .. } => format!("\"{text}\""),
            Token::Op(op) => format!("\"{}\"", op.symbol()),
            Token::LeftParen => "\"(\"".into(),
            Token::RightParen => "\")\"".into(),
            Token::And => "\"and\"".into(),
            Token::Or => "\"or\"".into(),
            Token::Not => "\"not\"".into(),
        }
    }
}

fn tokenize(text: &str) -> Result<Vec<Token>, String> {
    let chars: Vec<char> = text.chars().collect();
    let mut tokens = Vec::new();
    let mut i = 0;
    while i < chars.len() {
        let c = chars[i];
        let next = chars.get(i + 1).copied();
        let (token, width) = match c {
            c if c.is_whitespace() => {
                i += 1;
                continue;
            }
            '(' => (Token::LeftParen, 1),
            ')' => (Token::RightParen, 1),
            '<' if next == Some('=') => (Token::Op(Comparison::LessOrEqual), 2),
            '<' => (Token::Op(Comparison::Less), 1),
            '>' if next == Some('=') => (Token::Op(Comparison::GreaterOrEqual), 2),
            '>' => (Token::Op(Comparison::Greater), 1),
            '=' if next == Some('=') => return Err("write a single \"=\" to test equality".into()),
            '=' => (Token::Op(Comparison::Equal), 1),
            '!' if next == Some('=') => (Token::Op(Comparison::NotEqual), 2),
            '!' => return Err("write \"not\" to negate a condition, or \"!=\" for not equal".into()),
            '"' => {
                let Some(len) = chars[i + 1..].iter().position(|&q| q == '"') else {
                    return Err("a double quote is not closed".into());
                };
                let text: String = chars[i + 1..i + 1 + len].iter().collect();
                (Token::Word { text, quoted: true }, len + 2)
            }
            _ => {
                let len = chars[i..]
                    .iter()
                    .position(|&w| w.is_whitespace() || w == '"' || SPECIAL.contains(&w))
                    .unwrap_or(chars.len() - i);
                let text: String = chars[i..i + len].iter().collect();
                (bare_word(text), len)
            }
        };
        tokens.push(token);
        i += width;
    }
    Ok(tokens)
}

/// Classifies an unquoted word: keyword, finite number, or name.
fn bare_word(text: String) -> Token {
    match text.as_str() {
        AND => return Token::And,
        OR => return Token::Or,
        NOT => return Token::Not,
        _ => {}
    }
    let starts_numeric = text.starts_with(|c: char| c.is_ascii_digit() || matches!(c, '-' | '+' | '.'));
    match text.parse::<f64>() {
        Ok(value) if starts_numeric && value.is_finite() => Token::Number { value, text },
        _ => Token::Word { text, quoted: false },
    }
}

/// Recursive descent over the tokens: or → and → not → comparison. Each
/// step returns the condition and the depth of its tree; `nesting` counts the
/// open recursive calls. Both stop at [`MAX_CONDITION_DEPTH`].
struct Parser<'a> {
    tokens: &'a [Token],
    at: usize,
    nesting: usize,
}

/// A parsed condition and the depth of its tree.
type Parsed = (Condition, usize);

fn too_deep() -> String {
    format!(
        "the condition nests deeper than {MAX_CONDITION_DEPTH} levels (parentheses, not, and comparisons joined by and / or); \
         split it over several keep where lines"
    )
}

/// The depth of a node over children of depths `a` and `b`, within the limit.
fn deeper(a: usize, b: usize) -> Result<usize, String> {
    let depth = a.max(b) + 1;
    if depth > MAX_CONDITION_DEPTH {
        return Err(too_deep());
    }
    Ok(depth)
}

impl Parser<'_> {
    fn peek(&self) -> Option<&Token> {
        self.tokens.get(self.at)
    }

    fn next(&mut self) -> Option<&Token> {
        let token = self.tokens.get(self.at);
        self.at += 1;
        token
    }

    /// Count one more open recursive call, refusing past the limit.
    fn enter(&mut self) -> Result<(), String> {
        self.nesting += 1;
        if self.nesting > MAX_CONDITION_DEPTH {
            return Err(too_deep());
        }
        Ok(())
    }

    fn or_expression(&mut self) -> Result<Parsed, String> {
        self.enter()?;
        let (mut left, mut depth) = self.and_expression()?;
        while self.peek() == Some(&Token::Or) {
            self.at += 1;
            let (right, right_depth) = self.and_expression()?;
            depth = deeper(depth, right_depth)?;
            left = Condition::Or(Box::new(left), Box::new(right));
        }
        self.nesting -= 1;
        Ok((left, depth))
    }

    fn and_expression(&mut self) -> Result<Parsed, String> {
        let (mut left, mut depth) = self.not_expression()?;
        while self.peek() == Some(&Token::And) {
            self.at += 1;
            let (right, right_depth) = self.not_expression()?;
            depth = deeper(depth, right_depth)?;
            left = Condition::And(Box::new(left), Box::new(right));
        }
        Ok((left, depth))
    }

    fn not_expression(&mut self) -> Result<Parsed, String> {
        match self.peek() {
            Some(Token::Not) => {
                self.at += 1;
                self.enter()?;
                let (inner, depth) = self.not_expression()?;
                self.nesting -= 1;
                Ok((Condition::Not(Box::new(inner)), deeper(depth, 0)?))
            }
            Some(Token::LeftParen) => {
                self.at += 1;
                let (inner, depth) = self.or_expression()?;
                match self.next() {
                    Some(Token::RightParen) => Ok((inner, depth)),
                    _ => Err(format!("the \"(\" before \"{inner}\" is not closed")),
                }
            }
            _ => Ok((self.comparison()?, 1)),
        }
    }

    fn comparison(&mut self) -> Result<Condition, String> {
        let column = match self.next() {
            Some(Token::Word { text, .. }) => text.clone(),
            Some(Token::Number { text, .. }) => {
                return Err(format!(
                    "a comparison starts with the column name, then the number (e.g. girth > {text})"
                ))
            }
            Some(token) => return Err(format!("expected a column name, found {}", token.describe())),
            None => return Err("the condition ends where a column name was expected".into()),
        };
        let op = match self.next() {
            Some(Token::Op(op)) => *op,
            _ => {
                return Err(format!(
                    "expected a comparison (<, <=, >, >=, = or !=) after \"{column}\""
                ))
            }
        };
        let value = match self.next() {
            Some(Token::Number { value, text }) => Literal::Number { value: *value, text: text.clone() },
            Some(Token::Word { text, .. }) => Literal::Word(text.clone()),
            _ => {
                return Err(format!(
                    "expected a number or a level name after \"{column} {}\"",
                    op.symbol()
                ))
            }
        };
        Ok(Condition::Compare { column, op, value })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn precedence_follows_not_then_and_then_or() {
        // Usual Boolean precedence (recalled): not > and > or, left-associative.
        let parsed = Condition::parse("a > 1 or b < 2 and not c = x").unwrap();
        assert_eq!(parsed.to_string(), "a > 1 or b < 2 and not c = x");
        match parsed {
            Condition::Or(_, right) => assert!(matches!(*right, Condition::And(..))),
            other => panic!("expected or at the top, got {other:?}"),
        }
    }

    #[test]
    fn parentheses_survive_printing_only_where_needed() {
        let parsed = Condition::parse("(a > 1 or b < 2) and ((c = x))").unwrap();
        assert_eq!(parsed.to_string(), "(a > 1 or b < 2) and c = x");
    }

    #[test]
    fn quoted_names_keep_spaces() {
        let parsed = Condition::parse("\"tree age\" >= 3 and site = \"north bank\"").unwrap();
        assert_eq!(parsed.columns(), vec!["tree age", "site"]);
        assert_eq!(parsed.to_string(), "\"tree age\" >= 3 and site = \"north bank\"");
    }
}
