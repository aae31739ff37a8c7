//! Import of Graphviz DOT digraphs.
//!
//! Read: `strict`, `digraph NAME { … }`, node statements, edge chains
//! `a -> b -> c`, brace groups as edge ends (`{a b} -> c`, also `subgraph`
//! blocks), quoted ids, ports (`a:n`, ignored), `//`, `/* */` and `#` comments.
//! Attribute lists `[…]` and `key = value` statements are skipped, except one
//! node attribute this project defines: `hidden=true` marks the node
//! unobserved. Undirected graphs (`graph`, `--`) are refused, since a causal
//! graph needs a direction on every edge.

use std::collections::HashSet;

use super::build::MAX_EDGES;
use super::{Graph, GraphBuilder, GraphError};

/// The deepest brace groups may nest (`{ { … } }`). Reading a group recurses,
/// so the limit keeps a hostile file from overflowing the stack.
pub const MAX_DOT_NESTING: usize = 100;

/// One lexical token with its 1-based line.
#[derive(Debug, Clone, PartialEq)]
enum Tok {
    Id(String),
    Arrow,
    UndirectedEdge,
    Open,
    Close,
    OpenList,
    CloseList,
    Equals,
    Colon,
    Separator,
}

/// Read a DOT digraph into a graph called `name`.
///
/// ```
/// let g = waypath::graph::from_dot("stream", r#"digraph { runoff [hidden=true]; runoff -> {turbidity "nitrate"} }"#).unwrap();
/// assert_eq!(g.children("runoff").unwrap(), ["turbidity", "nitrate"]);
/// ```
pub fn from_dot(name: &str, text: &str) -> Result<Graph, GraphError> {
    let tokens = tokenize(text).map_err(|(line, problem)| GraphError::Dot { graph: name.to_owned(), line, problem })?;
    let mut parser = Parser { tokens, pos: 0, builder: GraphBuilder::new(name), nesting: 0 };
    parser.graph().map_err(|(line, problem)| GraphError::Dot { graph: name.to_owned(), line, problem })?;
    parser.builder.finish()
}

/// A problem and the line it is on.
type Problem = (usize, String);

/// Split DOT text into tokens, dropping comments.
fn tokenize(text: &str) -> Result<Vec<(Tok, usize)>, Problem> {
    let chars: Vec<char> = text.chars().collect();
    let mut out = Vec::new();
    let mut line = 1;
    let mut i = 0;
    let mut line_start = true;
    while i < chars.len() {
        let c = chars[i];
        let next = chars.get(i + 1).copied();
        if c == '\n' {
            line += 1;
            line_start = true;
            i += 1;
            continue;
        }
        if c.is_whitespace() {
            i += 1;
            continue;
        }
        let at_line_start = std::mem::replace(&mut line_start, false);
        match (c, next) {
            ('#', _) if at_line_start => i = skip_to_newline(&chars, i),
            ('/', Some('/')) => i = skip_to_newline(&chars, i),
            ('/', Some('*')) => {
                let start_line = line;
                i += 2;
                while i < chars.len() && !(chars[i] == '*' && chars.get(i + 1) == Some(&'/')) {
                    line += usize::from(chars[i] == '\n');
                    i += 1;
                }
                if i >= chars.len() {
                    return Err((start_line, "a `/*` comment is never closed with `*/`".to_owned()));
                }
                i += 2;
            }
            ('-', Some('>')) => {
                out.push((Tok::Arrow, line));
                i += 2;
            }
            ('-', Some('-')) => {
                out.push((Tok::UndirectedEdge, line));
                i += 2;
            }
            ('"', _) => {
                let (id, end, lines) = quoted(&chars, i).ok_or((line, "a quoted name is never closed with `\"`".to_owned()))?;
                out.push((Tok::Id(id), line));
                line += lines;
                i = end;
            }
            _ => {
                let single = match c {
                    '{' => Some(Tok::Open),
                    '}' => Some(Tok::Close),
                    '[' => Some(Tok::OpenList),
                    ']' => Some(Tok::CloseList),
                    '=' => Some(Tok::Equals),
                    ':' => Some(Tok::Colon),
                    ';' | ',' => Some(Tok::Separator),
                    _ => None,
                };
                if let Some(tok) = single {
                    out.push((tok, line));
                    i += 1;
                } else if is_id_char(c) {
                    let start = i;
                    while i < chars.len() && is_id_char(chars[i]) && !(chars[i] == '-' && matches!(chars.get(i + 1), Some('>' | '-'))) {
                        i += 1;
                    }
                    out.push((Tok::Id(chars[start..i].iter().collect()), line));
                } else {
                    return Err((line, format!("unexpected character `{c}`")));
                }
            }
        }
    }
    Ok(out)
}

/// Characters of an unquoted DOT id (names, numerals).
fn is_id_char(c: char) -> bool {
    c.is_alphanumeric() || c == '_' || c == '.' || c == '-'
}

/// Index of the newline ending the current line (or the end of text).
fn skip_to_newline(chars: &[char], mut i: usize) -> usize {
    while i < chars.len() && chars[i] != '\n' {
        i += 1;
    }
    i
}

/// A quoted id starting at `chars[start] == '"'`: its text, the index after
/// the closing quote, and how many newlines it spans.
fn quoted(chars: &[char], start: usize) -> Option<(String, usize, usize)> {
    let mut out = String::new();
    let mut newlines = 0;
    let mut i = start + 1;
    while i < chars.len() {
        match chars[i] {
            '"' => return Some((out, i + 1, newlines)),
            '\\' if chars.get(i + 1) == Some(&'"') => {
                out.push('"');
                i += 2;
                continue;
            }
            '\\' if chars.get(i + 1) == Some(&'\n') => {
                newlines += 1;
                i += 2;
                continue;
            }
            c => {
                newlines += usize::from(c == '\n');
                out.push(c);
            }
        }
        i += 1;
    }
    None
}

/// Recursive-descent reader feeding a [`GraphBuilder`].
struct Parser {
    tokens: Vec<(Tok, usize)>,
    pos: usize,
    builder: GraphBuilder,
    /// Brace groups open around the current token.
    nesting: usize,
}

impl Parser {
    /// `strict? digraph NAME? { statements }`
    fn graph(&mut self) -> Result<(), Problem> {
        if self.keyword("strict") {
            self.pos += 1;
        }
        if self.keyword("graph") {
            return Err(self.problem("this is an undirected `graph`; a causal graph needs `digraph` with `->` edges"));
        }
        if !self.keyword("digraph") {
            return Err(self.problem("a DOT causal graph starts with `digraph {`"));
        }
        self.pos += 1;
        if matches!(self.peek(), Some(Tok::Id(_))) {
            self.pos += 1;
        }
        self.expect(Tok::Open, "`{` after `digraph`")?;
        self.statements()?;
        if self.peek().is_some() {
            return Err(self.problem("there is text after the closing `}` of the digraph; remove it or move it inside"));
        }
        Ok(())
    }

    /// Statements up to and including the matching `}`; returns the node
    /// names they mention, in first-mention order.
    fn statements(&mut self) -> Result<Vec<String>, Problem> {
        self.nesting += 1;
        if self.nesting > MAX_DOT_NESTING {
            return Err(self.problem(&format!(
                "brace groups nest deeper than {MAX_DOT_NESTING} levels here; flatten the groups or write the edges one by one"
            )));
        }
        let mut mentioned: Vec<String> = Vec::new();
        let mut seen: HashSet<String> = HashSet::new();
        loop {
            match self.peek() {
                None => return Err(self.problem("the graph is never closed with `}`")),
                Some(Tok::Close) => {
                    self.pos += 1;
                    self.nesting -= 1;
                    return Ok(mentioned);
                }
                Some(Tok::Separator) => self.pos += 1,
                _ => {
                    for name in self.statement()? {
                        if seen.insert(name.clone()) {
                            mentioned.push(name);
                        }
                    }
                }
            }
        }
    }

    /// One node, edge, attribute or subgraph statement; returns the node
    /// names it mentions.
    fn statement(&mut self) -> Result<Vec<String>, Problem> {
        if ["graph", "node", "edge"].iter().any(|k| self.keyword(k)) && self.peek_at(1) == Some(&Tok::OpenList) {
            self.pos += 1;
            return self.skip_attributes().map(|_| Vec::new());
        }
        if matches!(self.peek(), Some(Tok::Id(_))) && self.peek_at(1) == Some(&Tok::Equals) {
            self.pos += 2;
            return self.id().map(|_| Vec::new());
        }
        let mut ends = vec![self.operand()?];
        loop {
            match self.peek() {
                Some(Tok::Arrow) => {
                    self.pos += 1;
                    ends.push(self.operand()?);
                }
                Some(Tok::UndirectedEdge) => return Err(self.problem("`--` is an undirected edge; write `->`")),
                _ => break,
            }
        }
        let hidden = self.skip_attributes()?;
        if ends.len() == 1 {
            for node in &ends[0] {
                self.builder.add_node(node, hidden);
            }
        }
        let edges: usize = ends.windows(2).map(|pair| pair[0].len().saturating_mul(pair[1].len())).fold(0, usize::saturating_add);
        if edges.saturating_add(self.builder.edge_count()) > MAX_EDGES {
            return Err(self.problem(&format!("this statement would give the graph more than {MAX_EDGES} edges; a causal graph that large cannot be questioned")));
        }
        for pair in ends.windows(2) {
            for from in &pair[0] {
                for to in &pair[1] {
                    self.builder.add_edge(from, to);
                }
            }
        }
        Ok(ends.concat())
    }

    /// A node id (port dropped) or a brace group (with or without
    /// `subgraph NAME`); returns the node names.
    fn operand(&mut self) -> Result<Vec<String>, Problem> {
        if self.keyword("subgraph") {
            self.pos += 1;
            if matches!(self.peek(), Some(Tok::Id(_))) {
                self.pos += 1;
            }
        }
        if self.peek() == Some(&Tok::Open) {
            self.pos += 1;
            return self.statements();
        }
        let name = self.id()?;
        self.builder.add_node(&name, false);
        while self.peek() == Some(&Tok::Colon) {
            self.pos += 1;
            self.id()?;
        }
        Ok(vec![name])
    }

    /// Skip `[ … ]` lists; true when one says `hidden=true`.
    fn skip_attributes(&mut self) -> Result<bool, Problem> {
        let mut hidden = false;
        while self.peek() == Some(&Tok::OpenList) {
            self.pos += 1;
            loop {
                match self.peek() {
                    None => return Err(self.problem("an attribute list `[` is never closed with `]`")),
                    Some(Tok::CloseList) => {
                        self.pos += 1;
                        break;
                    }
                    Some(Tok::Separator) => self.pos += 1,
                    _ => {
                        let key = self.id()?;
                        if self.peek() == Some(&Tok::Equals) {
                            self.pos += 1;
                            let value = self.id()?;
                            hidden |= key == "hidden" && value.eq_ignore_ascii_case("true");
                        }
                    }
                }
            }
        }
        Ok(hidden)
    }

    /// The next token, which must be an id.
    fn id(&mut self) -> Result<String, Problem> {
        match self.peek() {
            Some(Tok::Id(s)) => {
                let s = s.clone();
                self.pos += 1;
                Ok(s)
            }
            _ => Err(self.problem("expected a node name or value here")),
        }
    }

    /// Consume `tok` or fail naming what was wanted.
    fn expect(&mut self, tok: Tok, wanted: &str) -> Result<(), Problem> {
        if self.peek() == Some(&tok) {
            self.pos += 1;
            Ok(())
        } else {
            Err(self.problem(&format!("expected {wanted}")))
        }
    }

    /// True when the next token is the unquoted keyword `word` (any case).
    fn keyword(&self, word: &str) -> bool {
        matches!(self.peek(), Some(Tok::Id(s)) if s.eq_ignore_ascii_case(word))
    }

    fn peek(&self) -> Option<&Tok> {
        self.peek_at(0)
    }

    fn peek_at(&self, ahead: usize) -> Option<&Tok> {
        self.tokens.get(self.pos + ahead).map(|(t, _)| t)
    }

    /// A problem at the current token's line (or the last line at the end).
    fn problem(&self, text: &str) -> Problem {
        let line = self.tokens.get(self.pos).or(self.tokens.last()).map_or(1, |(_, l)| *l);
        (line, text.to_owned())
    }
}
