//! Span-keeping reader for a RON subset: find values by dotted path and override them in the text.
//!
//! Why this exists beside the `ron` crate (reviewed against ron 0.8 and serde_path_to_error 0.1):
//! - Typing and syntax belong to them: `ron` parses every file for real and reports the first
//!   syntax or type error with its line:column; `serde_path_to_error` adds the field path of a
//!   type error. This module never decides whether a file is valid RON of the right shape.
//! - What neither gives, kept here: the span of a value that *parsed fine* but fails a range
//!   check afterwards (`battery.capacity_ah = -2` must point at its line:column), the span of a
//!   key for messages about it, and `--set` edits made in the user's text, so that every
//!   position in a message is a position in the file the user has (an edit through a parsed value
//!   tree would re-serialise the file and move every position, and lose its comments).
//! - So the parser below is structural only (values, their spans, field names) and accepts the
//!   subset of RON the setup and profile files use; anything it cannot read it reports, and the
//!   `ron` parse that follows remains the judge.

use std::fmt;
use thiserror::Error;

/// A byte range in the text plus its 1-based line and column (column counts chars).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Span {
    /// Byte offset of the first byte.
    pub start: usize,
    /// Byte offset one past the last byte.
    pub end: usize,
    /// 1-based line of `start`.
    pub line: usize,
    /// 1-based column of `start`, counted in chars.
    pub col: usize,
}

impl Span {
    fn new(text: &str, start: usize, end: usize) -> Span {
        let (line, col) = line_col(text, start);
        Span {
            start,
            end,
            line,
            col,
        }
    }
}

/// One step of a dotted path: a field name or a list/tuple index (`drive.stages.0.ratio`).
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Segment {
    /// A named field of a struct (or a string/identifier key of a map).
    Field(String),
    /// A position in a list or tuple.
    Index(usize),
}

impl fmt::Display for Segment {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Segment::Field(name) => f.write_str(name),
            Segment::Index(i) => write!(f, "{i}"),
        }
    }
}

/// Why a dotted path could not be used.
#[derive(Debug, Clone, PartialEq, Eq, Error)]
pub enum PathError {
    /// The path has no segments at all.
    #[error("the path is empty")]
    Empty,
    /// Two dots in a row, or a leading/trailing dot (`position` counts segments from 1).
    #[error("path `{path}` has an empty segment (segment {position})")]
    EmptySegment { path: String, position: usize },
    /// A segment that is neither an identifier nor a decimal index.
    #[error("path `{path}`: `{segment}` is neither a field name nor an index")]
    BadSegment { path: String, segment: String },
}

/// Why an override could not be applied; `key` is the dotted path up to the failing step.
#[derive(Debug, Clone, PartialEq, Eq, Error)]
pub enum OverrideError {
    /// The path itself is malformed.
    #[error(transparent)]
    Path(#[from] PathError),
    /// The document could not be parsed.
    #[error("cannot read the text at {line}:{col}: {msg}")]
    Parse {
        line: usize,
        col: usize,
        msg: String,
    },
    /// The replacement text is not a single RON value.
    #[error("{key}: `{value}` is not a single RON value: {reason}")]
    BadValue {
        key: String,
        value: String,
        reason: String,
    },
    /// An index past the end of a list or tuple.
    #[error("{key}: index {index} is out of range (length {len})")]
    IndexOutOfRange {
        key: String,
        index: usize,
        len: usize,
    },
    /// A step that does not fit the value it is applied to (a field of a number, say).
    #[error("{key}: {parent} is {found}, not {expected}")]
    WrongKind {
        key: String,
        parent: String,
        found: String,
        expected: &'static str,
    },
    /// A map lacks the key (keys are never added to maps).
    #[error("{key}: the map has no such key")]
    NoSuchMapKey { key: String },
    /// The missing part of the path cannot be created.
    #[error("{key}: {reason}")]
    CannotCreate { key: String, reason: String },
    /// The edit produced unreadable text (not expected; reported rather than hidden).
    #[error("{key}: the edit would leave unreadable text ({detail})")]
    Broken { key: String, detail: String },
}

/// Result of an override: the new text and the span of the inserted value text inside it.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Edited {
    /// The whole edited document.
    pub text: String,
    /// Where the value text sits in `text`.
    pub value_span: Span,
}

/// Splits `a.b.0.c` into segments; numeric segments become Index. Empty segments are an error.
pub fn parse_path(path: &str) -> Result<Vec<Segment>, PathError> {
    if path.is_empty() {
        return Err(PathError::Empty);
    }
    let bad = |s: &str| PathError::BadSegment {
        path: path.into(),
        segment: s.into(),
    };
    let segment = |(i, s): (usize, &str)| match s {
        "" => Err(PathError::EmptySegment {
            path: path.into(),
            position: i + 1,
        }),
        _ if s.bytes().all(|b| b.is_ascii_digit()) => {
            s.parse().map(Segment::Index).map_err(|_| bad(s))
        }
        _ if valid_field(s) => Ok(Segment::Field(s.trim_start_matches("r#").into())),
        _ => Err(bad(s)),
    };
    path.split('.').enumerate().map(segment).collect()
}

/// Span of the value found at `path` (the value after `key:`), or None if absent or unparsable.
/// Navigation goes through `Some(...)` transparently. Empty path = the whole top-level value.
pub fn locate(text: &str, path: &[Segment]) -> Option<Span> {
    let root = parse_doc(text).ok()?;
    match walk(text, &root, path).ok()? {
        Walk::Found { node, .. } => Some(Span::new(text, node.start, node.end)),
        Walk::Missing { .. } => None,
    }
}

/// Span of the key itself (`capacity_ah` in `capacity_ah: 2.6`), for messages; None if absent.
/// A path ending in a list/tuple index has no key; the element's span is returned instead.
pub fn locate_key(text: &str, path: &[Segment]) -> Option<Span> {
    let root = parse_doc(text).ok()?;
    match walk(text, &root, path).ok()? {
        Walk::Found {
            key: Some((s, e)), ..
        } => Some(Span::new(text, s, e)),
        Walk::Found { node, .. } if !path.is_empty() => Some(Span::new(text, node.start, node.end)),
        _ => None,
    }
}

/// 1-based line and column of a byte offset (clamped to the text, rounded down to a char).
pub fn line_col(text: &str, byte: usize) -> (usize, usize) {
    let mut b = byte.min(text.len());
    while !text.is_char_boundary(b) {
        b -= 1;
    }
    let before = text.get(..b).unwrap_or("");
    let line_start = before.rfind('\n').map_or(0, |i| i + 1);
    let col = before.get(line_start..).map_or(0, |s| s.chars().count()) + 1;
    (before.matches('\n').count() + 1, col)
}

/// Sets the value at `path` to `value_text` (surrounding whitespace trimmed, otherwise verbatim).
/// An existing value is replaced; missing trailing fields of a named-field struct `( ... )` are
/// inserted before its closing paren as `key: value` (nesting `(inner: ...)` as needed).
pub fn set(text: &str, path: &[Segment], value_text: &str) -> Result<Edited, OverrideError> {
    if path.is_empty() {
        return Err(PathError::Empty.into());
    }
    let key = key_name(path);
    if let Some(Segment::Field(bad)) = path
        .iter()
        .find(|s| matches!(s, Segment::Field(f) if !valid_field(f)))
    {
        return Err(PathError::BadSegment {
            path: key,
            segment: bad.clone(),
        }
        .into());
    }
    let value = value_text.trim();
    check_value(value).map_err(|reason| OverrideError::BadValue {
        key: key.clone(),
        value: value.into(),
        reason,
    })?;
    let root = parse_doc(text).map_err(|e| {
        let (line, col) = line_col(text, e.pos);
        OverrideError::Parse {
            line,
            col,
            msg: e.msg,
        }
    })?;
    let built = match walk(text, &root, path)? {
        Walk::Found { node, .. } => build(text, None, (node.start, node.end), "", value, ""),
        Walk::Missing { at, fields } => insert(text, path, at, fields, value)?,
    };
    let broken = |detail: String| OverrideError::Broken {
        key: key.clone(),
        detail,
    };
    let (new_text, start) = built.ok_or_else(|| broken("an edit fell outside the text".into()))?;
    if let Err(e) = parse_doc(&new_text) {
        let (line, col) = line_col(&new_text, e.pos);
        return Err(broken(format!("{line}:{col}: {}", e.msg)));
    }
    let value_span = Span::new(&new_text, start, start + value.len());
    Ok(Edited {
        text: new_text,
        value_span,
    })
}

fn valid_field(s: &str) -> bool {
    let mut chars = s.strip_prefix("r#").unwrap_or(s).chars();
    matches!(chars.next(), Some(c) if c.is_ascii_alphabetic() || c == '_')
        && chars.all(|c| c.is_ascii_alphanumeric() || c == '_')
}

fn key_name(path: &[Segment]) -> String {
    path.iter()
        .map(Segment::to_string)
        .collect::<Vec<_>>()
        .join(".")
}

/// Checks that `value` is exactly one RON value that can sit inside a line of a document.
fn check_value(value: &str) -> Result<(), String> {
    if value.is_empty() {
        return Err("it is empty".into());
    }
    let mut p = Parser::new(value);
    let mut one = || {
        p.skip()?;
        p.value(0)?;
        p.skip()?;
        if p.pos < value.len() {
            return p.err(p.pos, "unexpected text after the value");
        }
        Ok(p.line_comment)
    };
    match one() {
        Ok(false) => Ok(()),
        Ok(true) => Err("a `//` comment would swallow the rest of the line".into()),
        Err(e) => Err(format!("{} (column {})", e.msg, line_col(value, e.pos).1)),
    }
}

/// Inserts the missing fields `path[at..]` (all named fields) into the struct `fields`.
fn insert(
    text: &str,
    path: &[Segment],
    at: usize,
    fields: &Fields,
    value: &str,
) -> Result<Option<(String, usize)>, OverrideError> {
    let mut prefix = String::new();
    for (j, seg) in path.iter().enumerate().skip(at) {
        let Segment::Field(name) = seg else {
            let reason = format!(
                "`{}` is missing and an override cannot create list elements",
                key_name(&path[..j])
            );
            return Err(OverrideError::CannotCreate {
                key: key_name(&path[..=j]),
                reason,
            });
        };
        prefix.push_str(if j > at { "(" } else { "" });
        prefix.push_str(name);
        prefix.push_str(": ");
    }
    let suffix = ")".repeat(path.len() - at - 1);
    let close = fields.close;
    let before_close = text.get(..close).unwrap_or("");
    let line_start = before_close.rfind('\n').map_or(0, |i| i + 1);
    let alone = before_close
        .get(line_start..)
        .is_some_and(|s| s.trim().is_empty());
    Ok(match fields.fields.last() {
        None => build(text, None, (close, close), &prefix, value, &suffix),
        // Closing paren on its own line: add a new line indented like the last field.
        Some(last) if alone && line_start > last.value.end => {
            let key_at = last.key.0;
            let ls = text
                .get(..key_at)
                .and_then(|s| s.rfind('\n'))
                .map_or(0, |i| i + 1);
            let indent = text
                .get(ls..key_at)
                .filter(|s| s.trim().is_empty())
                .unwrap_or("    ");
            let comma = (!fields.trailing_comma).then_some(last.value.end);
            let (pre, post) = (format!("{indent}{prefix}"), format!("{suffix},\n"));
            build(text, comma, (line_start, line_start), &pre, value, &post)
        }
        Some(_) if fields.trailing_comma => {
            let spaced = before_close.ends_with(char::is_whitespace);
            let pre = if spaced { prefix } else { format!(" {prefix}") };
            build(text, None, (close, close), &pre, value, &suffix)
        }
        Some(last) => {
            let end = last.value.end;
            build(
                text,
                None,
                (end, end),
                &format!(", {prefix}"),
                value,
                &suffix,
            )
        }
    })
}

/// Puts a comma at `comma_at` (if it precedes `range`) and replaces `range` with
/// `pre + value + post`; returns the new text and where `value` starts in it.
fn build(
    text: &str,
    comma_at: Option<usize>,
    range: (usize, usize),
    pre: &str,
    value: &str,
    post: &str,
) -> Option<(String, usize)> {
    let mut out = String::with_capacity(text.len() + pre.len() + value.len() + post.len() + 1);
    let mut from = 0;
    if let Some(c) = comma_at.filter(|&c| c <= range.0) {
        out.push_str(text.get(..c)?);
        out.push(',');
        from = c;
    }
    out.push_str(text.get(from..range.0)?);
    out.push_str(pre);
    let start = out.len();
    out.push_str(value);
    out.push_str(post);
    out.push_str(text.get(range.1..)?);
    Some((out, start))
}

// ---- the parser: a tree of byte ranges -------------------------------------------------------

const MAX_DEPTH: usize = 128;

#[derive(Debug)]
struct PErr {
    pos: usize,
    msg: String,
}

#[derive(Debug)]
struct Node {
    start: usize,
    end: usize,
    kind: Kind,
}

#[derive(Debug)]
enum Kind {
    Struct(Fields),
    Tuple(Vec<Node>),
    List(Vec<Node>),
    Map(Vec<(Node, Node)>),
    Some(Box<Node>),
    None,
    Bool,
    Ident,
    Number,
    Str,
    Char,
}

/// Named fields of a struct, or `()`; `close` is the byte offset of the `)`.
#[derive(Debug)]
struct Fields {
    fields: Vec<Field>,
    close: usize,
    trailing_comma: bool,
}

#[derive(Debug)]
struct Field {
    key: (usize, usize),
    name: String,
    value: Node,
}

enum Walk<'a> {
    Found {
        node: &'a Node,
        key: Option<(usize, usize)>,
    },
    Missing {
        at: usize,
        fields: &'a Fields,
    },
}

fn describe(text: &str, node: &Node) -> String {
    let snippet = text.get(node.start..node.end).unwrap_or("?");
    let what = match &node.kind {
        Kind::Struct(f) if f.fields.is_empty() => "an empty `()`",
        Kind::Struct(_) => "a struct with named fields",
        Kind::Tuple(_) => "a tuple",
        Kind::List(_) => "a list",
        Kind::Map(_) => "a map",
        Kind::Some(_) => "Some(...)",
        Kind::None => "None",
        Kind::Str => "a string",
        Kind::Char => "a char",
        Kind::Bool => return format!("the boolean `{snippet}`"),
        Kind::Ident => return format!("the identifier `{snippet}`"),
        Kind::Number => return format!("the number `{snippet}`"),
    };
    what.into()
}

fn map_key_matches(text: &str, key: &Node, want: &str) -> bool {
    let raw = text.get(key.start..key.end).unwrap_or("");
    match key.kind {
        Kind::Str => raw.strip_prefix('"').and_then(|s| s.strip_suffix('"')) == Some(want),
        Kind::Ident | Kind::Number => raw == want,
        _ => false,
    }
}

fn walk<'a>(text: &str, root: &'a Node, path: &[Segment]) -> Result<Walk<'a>, OverrideError> {
    let (mut node, mut key) = (root, None);
    for (i, seg) in path.iter().enumerate() {
        while let Kind::Some(inner) = &node.kind {
            node = inner;
        }
        let here = key_name(&path[..=i]);
        let wrong = |expected| OverrideError::WrongKind {
            key: here.clone(),
            parent: if i == 0 {
                "the top-level value".into()
            } else {
                format!("`{}`", key_name(&path[..i]))
            },
            found: describe(text, node),
            expected,
        };
        (node, key) = match (seg, &node.kind) {
            (Segment::Field(name), Kind::Struct(f)) => match f
                .fields
                .iter()
                .find(|fl| fl.name == name.trim_start_matches("r#"))
            {
                Some(fl) => (&fl.value, Some(fl.key)),
                None => return Ok(Walk::Missing { at: i, fields: f }),
            },
            (Segment::Index(n), Kind::List(items) | Kind::Tuple(items)) => match items.get(*n) {
                Some(item) => (item, None),
                None => {
                    return Err(OverrideError::IndexOutOfRange {
                        key: here,
                        index: *n,
                        len: items.len(),
                    })
                }
            },
            (_, Kind::Map(entries)) => {
                let want = seg.to_string();
                match entries
                    .iter()
                    .find(|(k, _)| map_key_matches(text, k, &want))
                {
                    Some((k, v)) => (v, Some((k.start, k.end))),
                    None => return Err(OverrideError::NoSuchMapKey { key: here }),
                }
            }
            (Segment::Field(_), _) => return Err(wrong("a struct with named fields")),
            (Segment::Index(_), _) => return Err(wrong("a list or tuple")),
        };
    }
    Ok(Walk::Found { node, key })
}

fn parse_doc(text: &str) -> Result<Node, PErr> {
    let mut p = Parser::new(text);
    p.skip()?;
    while p.peek() == Some(b'#') {
        p.attribute()?;
        p.skip()?;
    }
    let node = p.value(0)?;
    p.skip()?;
    if p.pos < text.len() {
        return p.err(p.pos, "unexpected text after the top-level value");
    }
    Ok(node)
}

/// Recursive-descent parser over bytes; `pos` only ever stops on a char boundary.
struct Parser<'t> {
    text: &'t str,
    b: &'t [u8],
    pos: usize,
    line_comment: bool,
}

impl<'t> Parser<'t> {
    fn new(text: &'t str) -> Self {
        Parser {
            text,
            b: text.as_bytes(),
            pos: 0,
            line_comment: false,
        }
    }

    fn peek(&self) -> Option<u8> {
        self.b.get(self.pos).copied()
    }

    fn at(&self, off: usize) -> Option<u8> {
        self.b.get(self.pos + off).copied()
    }

    fn err<T>(&self, pos: usize, msg: impl Into<String>) -> Result<T, PErr> {
        Err(PErr {
            pos,
            msg: msg.into(),
        })
    }

    /// "expected {what}, found {whatever is here}" at the current position.
    fn fail<T>(&self, what: &str) -> Result<T, PErr> {
        let found = match self.text.get(self.pos..).and_then(|s| s.chars().next()) {
            Some(c) => format!("`{c}`"),
            None => "the end of the text".into(),
        };
        self.err(self.pos, format!("expected {what}, found {found}"))
    }

    fn expect(&mut self, c: u8, what: &str) -> Result<(), PErr> {
        if self.peek() != Some(c) {
            return self.fail(what);
        }
        self.pos += 1;
        Ok(())
    }

    /// Skips whitespace, `//` comments and (nested) `/* */` comments.
    fn skip(&mut self) -> Result<(), PErr> {
        loop {
            match (self.peek(), self.at(1)) {
                (Some(c), _) if c.is_ascii_whitespace() => self.pos += 1,
                (Some(b'/'), Some(b'/')) => {
                    self.line_comment = true;
                    while self.peek().is_some_and(|c| c != b'\n') {
                        self.pos += 1;
                    }
                }
                (Some(b'/'), Some(b'*')) => {
                    let (start, mut depth) = (self.pos, 0);
                    loop {
                        match (self.peek(), self.at(1)) {
                            (Some(b'*'), Some(b'/')) => depth -= 1,
                            (Some(b'/'), Some(b'*')) => depth += 1,
                            (Some(_), _) => {
                                self.pos += 1;
                                continue;
                            }
                            (None, _) => return self.err(start, "unterminated block comment"),
                        }
                        self.pos += 2;
                        if depth == 0 {
                            break;
                        }
                    }
                }
                _ => return Ok(()),
            }
        }
    }

    /// Skips one `#![...]` attribute.
    fn attribute(&mut self) -> Result<(), PErr> {
        let start = self.pos;
        for c in [b'#', b'!', b'['] {
            self.skip()?;
            self.expect(c, "an attribute `#![...]`")?;
        }
        let mut depth = 1;
        while depth > 0 {
            match self.peek() {
                Some(b'"') => self.string()?,
                Some(b'/') if matches!(self.at(1), Some(b'/' | b'*')) => self.skip()?,
                Some(c) => {
                    depth += usize::from(c == b'[');
                    depth -= usize::from(c == b']');
                    self.pos += 1;
                }
                None => return self.err(start, "unterminated attribute"),
            }
        }
        Ok(())
    }

    /// Reads an identifier or raw identifier (`r#name`) and returns its byte range.
    fn ident(&mut self) -> Option<(usize, usize)> {
        let start = self.pos;
        let raw_ok = |c: u8| c.is_ascii_alphanumeric() || matches!(c, b'_' | b'.' | b'+' | b'-');
        if self.peek() == Some(b'r') && self.at(1) == Some(b'#') && self.at(2).is_some_and(raw_ok) {
            self.pos += 2;
            while self.peek().is_some_and(raw_ok) {
                self.pos += 1;
            }
        } else if self
            .peek()
            .is_some_and(|c| c.is_ascii_alphabetic() || c == b'_')
        {
            while self
                .peek()
                .is_some_and(|c| c.is_ascii_alphanumeric() || c == b'_')
            {
                self.pos += 1;
            }
        } else {
            return None;
        }
        Some((start, self.pos))
    }

    fn value(&mut self, depth: usize) -> Result<Node, PErr> {
        let start = self.pos;
        if depth > MAX_DEPTH {
            return self.err(start, "values are nested too deeply");
        }
        let hashes = self
            .b
            .iter()
            .skip(start + 1)
            .take_while(|&&h| h == b'#')
            .count();
        let kind = match self.peek() {
            None => return self.fail("a value"),
            Some(b'(') => {
                self.pos += 1;
                self.paren(depth)?
            }
            Some(b'[') => {
                self.pos += 1;
                Kind::List(self.items(b']', depth)?)
            }
            Some(b'{') => {
                self.pos += 1;
                let mut entries = Vec::new();
                self.delimited(b'}', |p| {
                    let k = p.value(depth + 1)?;
                    p.skip()?;
                    p.expect(b':', "`:` after the map key")?;
                    p.skip()?;
                    entries.push((k, p.value(depth + 1)?));
                    Ok(())
                })?;
                Kind::Map(entries)
            }
            Some(b'"') => {
                self.string()?;
                Kind::Str
            }
            Some(b'\'') => self.char_lit()?,
            Some(b'r') if self.at(1 + hashes) == Some(b'"') => self.raw_string(hashes)?,
            Some(b'0'..=b'9' | b'+' | b'-' | b'.') => self.number()?,
            Some(_) => self.word(depth)?,
        };
        Ok(Node {
            start,
            end: self.pos,
            kind,
        })
    }

    /// Identifiers: booleans, `None`, `inf`/`NaN`, `Some(v)`, `Name(...)` or a bare name.
    fn word(&mut self, depth: usize) -> Result<Kind, PErr> {
        let Some((s, e)) = self.ident() else {
            return self.fail("a value");
        };
        let word = self.text.get(s..e).unwrap_or("");
        match word {
            "true" | "false" => return Ok(Kind::Bool),
            "None" => return Ok(Kind::None),
            "inf" | "NaN" => return Ok(Kind::Number),
            _ => {}
        }
        let after = self.pos;
        self.skip()?;
        if self.peek() != Some(b'(') {
            self.pos = after;
            return Ok(Kind::Ident);
        }
        self.pos += 1;
        if word != "Some" {
            return self.paren(depth);
        }
        self.skip()?;
        let inner = self.value(depth + 1)?;
        self.skip()?;
        if self.peek() == Some(b',') {
            self.pos += 1;
            self.skip()?;
        }
        self.expect(b')', "`)` to close `Some(`")?;
        Ok(Kind::Some(Box::new(inner)))
    }

    /// After `(`: a unit `()`, a struct with named fields, or a tuple.
    fn paren(&mut self, depth: usize) -> Result<Kind, PErr> {
        self.skip()?;
        let save = self.pos;
        let named = self.ident().is_some() && self.skip().is_ok() && self.peek() == Some(b':');
        self.pos = save;
        if !named && self.peek() != Some(b')') {
            return Ok(Kind::Tuple(self.items(b')', depth)?));
        }
        let mut fields = Vec::new();
        let (close, trailing_comma) = self.delimited(b')', |p| {
            let Some(key) = p.ident() else {
                return p.fail("a field name");
            };
            let raw = p.text.get(key.0..key.1).unwrap_or("");
            let name = raw.strip_prefix("r#").unwrap_or(raw).to_string();
            p.skip()?;
            p.expect(b':', "`:` after the field name")?;
            p.skip()?;
            fields.push(Field {
                key,
                name,
                value: p.value(depth + 1)?,
            });
            Ok(())
        })?;
        Ok(Kind::Struct(Fields {
            fields,
            close,
            trailing_comma,
        }))
    }

    fn items(&mut self, close: u8, depth: usize) -> Result<Vec<Node>, PErr> {
        let mut items = Vec::new();
        self.delimited(close, |p| {
            items.push(p.value(depth + 1)?);
            Ok(())
        })?;
        Ok(items)
    }

    /// Comma-separated items up to `close`; returns the offset of `close` and whether a
    /// trailing comma preceded it.
    fn delimited(
        &mut self,
        close: u8,
        mut item: impl FnMut(&mut Self) -> Result<(), PErr>,
    ) -> Result<(usize, bool), PErr> {
        let mut trailing = false;
        loop {
            self.skip()?;
            if self.peek() == Some(close) {
                self.pos += 1;
                return Ok((self.pos - 1, trailing));
            }
            item(self)?;
            self.skip()?;
            trailing = self.peek() == Some(b',');
            if trailing {
                self.pos += 1;
            } else if self.peek() != Some(close) {
                return self.fail(&format!("`,` or `{}`", char::from(close)));
            }
        }
    }

    fn string(&mut self) -> Result<(), PErr> {
        let start = self.pos;
        self.pos += 1;
        loop {
            match self.peek() {
                None => return self.err(start, "unterminated string"),
                Some(b'\\') => self.pos = (self.pos + 2).min(self.b.len()),
                Some(c) => {
                    self.pos += 1;
                    if c == b'"' {
                        return Ok(());
                    }
                }
            }
        }
    }

    fn raw_string(&mut self, hashes: usize) -> Result<Kind, PErr> {
        let start = self.pos;
        self.pos += 2 + hashes;
        let close = format!("\"{}", "#".repeat(hashes));
        let Some(i) = self.text.get(self.pos..).and_then(|rest| rest.find(&close)) else {
            return self.err(start, "unterminated raw string");
        };
        self.pos += i + close.len();
        Ok(Kind::Str)
    }

    fn char_lit(&mut self) -> Result<Kind, PErr> {
        let start = self.pos;
        self.pos += 1;
        match self.peek() {
            Some(b'\\') => {
                self.pos = (self.pos + 2).min(self.b.len());
                while self.peek().is_some_and(|c| c != b'\'' && c != b'\n') && self.pos - start < 12
                {
                    self.pos += 1;
                }
            }
            Some(b'\'') | None => return self.err(start, "empty or unterminated char"),
            Some(_) => {
                let c = self.text.get(self.pos..).and_then(|s| s.chars().next());
                self.pos += c.map_or(1, char::len_utf8);
            }
        }
        if self.peek() != Some(b'\'') {
            return self.err(start, "unterminated char");
        }
        self.pos += 1;
        Ok(Kind::Char)
    }

    /// A lenient number lexeme (sign, digits, `_`, `.`, exponent, `0x..`, `inf`, `NaN`); the
    /// typed parse checks it properly later.
    fn number(&mut self) -> Result<Kind, PErr> {
        let start = self.pos;
        if matches!(self.peek(), Some(b'+' | b'-')) {
            self.pos += 1;
        }
        if self.peek().is_some_and(|c| c.is_ascii_alphabetic()) {
            let s = self.pos;
            while self.peek().is_some_and(|c| c.is_ascii_alphanumeric()) {
                self.pos += 1;
            }
            return match self.text.get(s..self.pos) {
                Some("inf" | "NaN") => Ok(Kind::Number),
                _ => self.err(start, "invalid number"),
            };
        }
        let hex = self.b.get(self.pos..self.pos + 2) == Some(b"0x".as_slice());
        let mut digits = false;
        while let Some(c) = self.peek() {
            let after_exp =
                self.pos > start && matches!(self.b.get(self.pos - 1), Some(b'e' | b'E'));
            if c.is_ascii_alphanumeric() || c == b'_' || c == b'.' {
                digits |= c.is_ascii_digit();
            } else if !(matches!(c, b'+' | b'-') && !hex && after_exp) {
                break;
            }
            self.pos += 1;
        }
        if !digits {
            return self.err(start, "invalid number");
        }
        Ok(Kind::Number)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const DOC: &str = r##"#![enable(implicit_some)]
// Top comment with ( [ { brackets ) ] }
Setup(
    name: "crank // not a comment )",
    battery: (
        capacity_ah: 2.6, /* nested /* ( */ ] */
        chemistry: lead_acid,
    ),
    drive: (
        stages: [
            (ratio: 3.5, teeth: 12),
            (ratio: 1_000, teeth: 0x1F),
        ],
    ),
    diode: Some(Shockley(is: 1e-12, n: 1.8)),
    limits: Some((max_v: +14.4, min_v: -1.5e-3)),
    extra: None,
    tags: {"a": 1, b: 2},
    pair: (inf, NaN),
    ch: 'x',
    raw: r#"he said "hi" )"#,
    unit: (),
    flag: true,
)
"##;

    fn p(path: &str) -> Vec<Segment> {
        parse_path(path).expect("test paths are valid")
    }

    fn slice(text: &str, span: Span) -> &str {
        text.get(span.start..span.end)
            .expect("span on char boundaries")
    }

    fn assert_parses(text: &str) {
        if let Err(e) = parse_doc(text) {
            panic!(
                "edited text does not parse at byte {}: {}\n{text}",
                e.pos, e.msg
            );
        }
    }

    /// Checks a located value: its text and its 1-based position.
    fn at(text: &str, path: &str, want: &str, line: usize, col: usize) {
        let span = locate(text, &p(path)).unwrap_or_else(|| panic!("{path} not found"));
        assert_eq!(slice(text, span), want, "text of {path}");
        assert_eq!((span.line, span.col), (line, col), "position of {path}");
    }

    fn set_ok(text: &str, path: &str, value: &str) -> Edited {
        let edited = set(text, &p(path), value).unwrap_or_else(|e| panic!("{path}: {e}"));
        assert_parses(&edited.text);
        assert_eq!(slice(&edited.text, edited.value_span), value.trim());
        assert_eq!(locate(&edited.text, &p(path)), Some(edited.value_span));
        edited
    }

    fn set_err(text: &str, path: &str) -> OverrideError {
        set(text, &p(path), "1").expect_err("the override must fail")
    }

    fn parse_err_at(text: &str) -> (usize, usize) {
        match set_err(text, "a") {
            OverrideError::Parse { line, col, .. } => (line, col),
            other => panic!("not a parse error: {other:?}"),
        }
    }

    #[test]
    fn parse_path_splits_and_rejects() {
        use Segment::{Field, Index};
        let f = |s: &str| Field(s.to_string());
        assert_eq!(
            p("drive.stages.0.ratio"),
            [f("drive"), f("stages"), Index(0), f("ratio")]
        );
        assert_eq!(p("r#type.x2"), [f("type"), f("x2")]);
        assert_eq!(parse_path(""), Err(PathError::Empty));
        let empty = |s: &str, position| {
            Err(PathError::EmptySegment {
                path: s.into(),
                position,
            })
        };
        assert_eq!(parse_path("a..b"), empty("a..b", 2));
        assert_eq!(parse_path(".a"), empty(".a", 1));
        assert_eq!(parse_path("a."), empty("a.", 2));
        for bad in ["a b", "a.-1", "x=1", "99999999999999999999999", "a.2x", "é"] {
            assert!(
                matches!(parse_path(bad), Err(PathError::BadSegment { .. })),
                "{bad}"
            );
        }
    }

    #[test]
    fn line_col_counts_chars_and_clamps() {
        assert_eq!(line_col("ab\ncd", 0), (1, 1));
        assert_eq!(line_col("ab\ncd", 3), (2, 1));
        assert_eq!(line_col("ab\ncd", 4), (2, 2));
        assert_eq!(line_col("ab\ncd", 99), (2, 3));
        assert_eq!(line_col("éa", 1), (1, 1));
        assert_eq!(line_col("éa", 2), (1, 2));
        assert_eq!(line_col("", 5), (1, 1));
    }

    #[test]
    fn locates_at_several_depths() {
        at(DOC, "battery.capacity_ah", "2.6", 6, 22);
        at(DOC, "battery.chemistry", "lead_acid", 7, 20);
        at(DOC, "drive.stages.1.teeth", "0x1F", 12, 35);
        at(DOC, "drive.stages.0", "(ratio: 3.5, teeth: 12)", 11, 13);
        at(DOC, "diode.n", "1.8", 15, 40);
        at(DOC, "diode", "Some(Shockley(is: 1e-12, n: 1.8))", 15, 12);
        at(DOC, "limits.min_v", "-1.5e-3", 16, 40);
        at(DOC, "tags.a", "1", 18, 17);
        at(DOC, "tags.b", "2", 18, 23);
        at(DOC, "pair.1", "NaN", 19, 17);
        at(DOC, "ch", "'x'", 20, 9);
        at(DOC, "unit", "()", 22, 11);
        let whole = locate(DOC, &[]).expect("whole document");
        assert_eq!((whole.line, whole.col), (3, 1));
        assert!(slice(DOC, whole).starts_with("Setup(") && slice(DOC, whole).ends_with(')'));
    }

    #[test]
    fn comments_and_strings_do_not_confuse() {
        at(DOC, "name", "\"crank // not a comment )\"", 4, 11);
        at(DOC, "raw", "r#\"he said \"hi\" )\"#", 21, 10);
        at(DOC, "flag", "true", 23, 11);
        let t = "( s: \"a)b//c\\\"]\", /* ( [ /* } */ */ t: [1, /* ] */ 2], // ) ]\n u: 'x')";
        at(t, "t.1", "2", 1, 52);
        at(t, "u", "'x'", 2, 5);
        at("(s: \"héllo wörld\", x: 5)", "x", "5", 1, 23);
    }

    #[test]
    fn locate_misses_give_none() {
        for path in [
            "battery.nope",
            "drive.stages.2",
            "drive.stages.2.ratio",
            "battery.capacity_ah.x",
        ] {
            assert_eq!(locate(DOC, &p(path)), None, "{path}");
        }
        assert_eq!(locate(DOC, &p("extra.x")), None);
        assert_eq!(locate("(a: 1, b: )", &p("a")), None);
        assert_eq!(locate_key(DOC, &p("nope")), None);
        assert_eq!(locate_key(DOC, &[]), None);
    }

    #[test]
    fn locate_key_points_at_the_key() {
        let k = locate_key(DOC, &p("battery.capacity_ah")).expect("key");
        assert_eq!((slice(DOC, k), k.line, k.col), ("capacity_ah", 6, 9));
        let k = locate_key(DOC, &p("tags.a")).expect("map key");
        assert_eq!(slice(DOC, k), "\"a\"");
        let k = locate_key(DOC, &p("drive.stages.1")).expect("element");
        assert_eq!((slice(DOC, k), k.line), ("(ratio: 1_000, teeth: 0x1F)", 12));
    }

    #[test]
    fn set_replaces_existing_values() {
        let e = set_ok(DOC, "battery.capacity_ah", "3.2");
        assert!(e.text.contains("capacity_ah: 3.2, /* nested"));
        assert_eq!((e.value_span.line, e.value_span.col), (6, 22));
        let e = set_ok(DOC, "battery.chemistry", "nickel_metal");
        assert!(e.text.contains("chemistry: nickel_metal,\n"));
        let e = set_ok(DOC, "drive.stages.0", "  (ratio: 2.0, teeth: 9) ");
        at(&e.text, "drive.stages.0.teeth", "9", 11, 33);
        at(&e.text, "drive.stages.1.teeth", "0x1F", 12, 35);
        let e = set_ok(DOC, "diode.n", "2.05");
        assert!(e.text.contains("Some(Shockley(is: 1e-12, n: 2.05))"));
        let e = set_ok(DOC, "extra", "Some(\"a)b\")");
        at(&e.text, "flag", "true", 23, 11);
        assert_eq!(
            e.text.len(),
            DOC.len() + "Some(\"a)b\")".len() - "None".len()
        );
    }

    #[test]
    fn set_inserts_into_single_line_structs() {
        assert_eq!(set_ok("(a: 1, b: 2,)", "c", "3").text, "(a: 1, b: 2, c: 3)");
        assert_eq!(set_ok("(a: 1, )", "c", "3").text, "(a: 1, c: 3)");
        assert_eq!(set_ok("(a: 1, b: 2)", "c", "3").text, "(a: 1, b: 2, c: 3)");
        assert_eq!(
            set_ok("(a: 1 /* x */)", "c", "3").text,
            "(a: 1, c: 3 /* x */)"
        );
        assert_eq!(set_ok("()", "c", "3").text, "(c: 3)");
        assert_eq!(set_ok("Cfg( )", "c", "[1, 2]").text, "Cfg( c: [1, 2])");
        assert_eq!(set_ok("(a: ())", "a.b", "x").text, "(a: (b: x))");
        let raw = [Segment::Field("r#type".into())];
        assert_eq!(
            set("(r#type: 1)", &raw, "2").map(|e| e.text),
            Ok("(r#type: 2)".into())
        );
        assert_eq!(
            set("()", &raw, "2").map(|e| e.text),
            Ok("(r#type: 2)".into())
        );
    }

    #[test]
    fn set_inserts_nested_missing_fields() {
        assert_eq!(
            set_ok("(a: ())", "a.b.c.d", "1").text,
            "(a: (b: (c: (d: 1))))"
        );
        assert_eq!(set_ok("(a: 1)", "x.y", "true").text, "(a: 1, x: (y: true))");
        let e = set_ok(DOC, "drive.motor.kv", "120");
        assert!(
            e.text
                .contains("        ],\n        motor: (kv: 120),\n    ),\n"),
            "{}",
            e.text
        );
        assert_eq!((e.value_span.line, e.value_span.col), (14, 21));
        let e = set_ok(DOC, "diode.temp_k", "300");
        assert!(e.text.contains("Shockley(is: 1e-12, n: 1.8, temp_k: 300)"));
        let e = set_ok(DOC, "limits.max_a", "2");
        assert!(e.text.contains("(max_v: +14.4, min_v: -1.5e-3, max_a: 2)"));
    }

    #[test]
    fn set_inserts_into_multi_line_structs() {
        let e = set_ok("(\n    a: 1,\n    b: 2,\n)\n", "c", "3");
        assert_eq!(e.text, "(\n    a: 1,\n    b: 2,\n    c: 3,\n)\n");
        assert_eq!((e.value_span.line, e.value_span.col), (4, 8));
        let e = set_ok("(\n  a: 1,\n  b: 2 // two\n)", "c", "3");
        assert_eq!(e.text, "(\n  a: 1,\n  b: 2, // two\n  c: 3,\n)");
        let e = set_ok(DOC, "battery.max_temp_c", "45.0");
        assert!(e
            .text
            .contains("lead_acid,\n        max_temp_c: 45.0,\n    ),"));
        assert_eq!((e.value_span.line, e.value_span.col), (8, 21));
        let e = set_ok(DOC, "seed", "7");
        assert!(e.text.ends_with("    flag: true,\n    seed: 7,\n)\n"));
        assert!(set_ok(&e.text, "seed", "8")
            .text
            .ends_with("    seed: 8,\n)\n"));
    }

    #[test]
    fn set_reports_path_errors() {
        let e = set_err(DOC, "drive.stages.5.ratio");
        assert!(matches!(
            e,
            OverrideError::IndexOutOfRange {
                index: 5,
                len: 2,
                ..
            }
        ));
        assert_eq!(
            e.to_string(),
            "drive.stages.5: index 5 is out of range (length 2)"
        );
        let e = set_err(DOC, "battery.capacity_ah.x");
        let want = "`battery.capacity_ah` is the number `2.6`, not a struct with named fields";
        assert_eq!(e.to_string(), format!("battery.capacity_ah.x: {want}"));
        assert!(set_err(DOC, "extra.x")
            .to_string()
            .contains("`extra` is None,"));
        assert!(set_err(DOC, "drive.stages.x")
            .to_string()
            .contains("is a list,"));
        assert!(set_err(DOC, "battery.chemistry.x")
            .to_string()
            .contains("identifier `lead_acid`"));
        let e = set_err(DOC, "battery.0");
        assert!(
            matches!(
                e,
                OverrideError::WrongKind {
                    expected: "a list or tuple",
                    ..
                }
            ),
            "{e}"
        );
        let e = set_err("5", "a");
        assert!(
            e.to_string()
                .contains("the top-level value is the number `5`"),
            "{e}"
        );
        assert_eq!(
            set_err(DOC, "tags.zzz"),
            OverrideError::NoSuchMapKey {
                key: "tags.zzz".into()
            }
        );
        let e = set_err(DOC, "drive.gears.0.ratio");
        assert!(matches!(e, OverrideError::CannotCreate { ref key, .. } if key == "drive.gears.0"));
        assert_eq!(
            set(DOC, &[], "1"),
            Err(OverrideError::Path(PathError::Empty))
        );
        let bad = [Segment::Field("a b".into())];
        assert!(matches!(
            set("()", &bad, "1"),
            Err(OverrideError::Path(PathError::BadSegment { .. }))
        ));
    }

    #[test]
    fn set_reports_unparsable_text_with_position() {
        assert_eq!(parse_err_at("(\n  a: 1,\n  b: ]\n)"), (3, 6));
        let e = set_err("(\n  a: 1,\n  b: ]\n)", "a");
        assert_eq!(
            e.to_string(),
            "cannot read the text at 3:6: expected a value, found `]`"
        );
        assert_eq!(parse_err_at("(a: 1) /* open"), (1, 8));
        assert_eq!(parse_err_at("(a: \"x)"), (1, 5));
        assert_eq!(parse_err_at("(a: 1) (b: 2)"), (1, 8));
        assert_eq!(parse_err_at("(a: 1 b: 2)"), (1, 7));
        assert_eq!(parse_err_at("#![enable(x)\n(a: 1)"), (1, 1));
        assert_eq!(parse_err_at("#[enable(x)]\n(a: 1)"), (1, 2));
        at("# ! [enable(a), /* ] */]\n#![x]\n(a: 1)", "a", "1", 3, 5);
        assert_eq!(parse_err_at("(\n  é: 1)"), (2, 3));
        let deep = "[".repeat(100_000);
        assert!(matches!(set_err(&deep, "a"), OverrideError::Parse { .. }));
        assert_eq!(locate(&deep, &[]), None);
    }

    #[test]
    fn set_rejects_bad_value_text() {
        for v in [
            "", "   ", "(1, 2", "\"abc", "1, 2", "5 // c", ")", "[1)", "r#\"x\"", "/* x",
        ] {
            let e = set(DOC, &p("battery.capacity_ah"), v).expect_err(v);
            assert!(
                matches!(e, OverrideError::BadValue { ref key, .. } if key == "battery.capacity_ah"),
                "{v}"
            );
        }
        set_ok(DOC, "name", "\"a // b ) ]\"");
        let e = set(DOC, &p("battery.capacity_ah"), "3 /* ah */").expect("block comment is fine");
        assert!(e.text.contains("capacity_ah: 3 /* ah */, /* nested"));
        assert_eq!(slice(&e.text, e.value_span), "3 /* ah */");
        at(&e.text, "battery.capacity_ah", "3", 6, 22);
    }

    /// Every prefix of the sample, and every single-char corruption of it, is handled without
    /// panicking; successful edits always produce text that parses and locates the new value.
    #[test]
    fn never_panics_on_truncated_or_corrupted_text() {
        let paths = ["drive.stages.1.teeth", "diode.n", "new.deep"];
        let probe = |t: &str| {
            for segs in paths.map(p) {
                let _ = (locate(t, &segs), locate_key(t, &segs));
                if let Ok(e) = set(t, &segs, "(x: [1, 2])") {
                    assert!(parse_doc(&e.text).is_ok(), "{}", e.text);
                    assert_eq!(locate(&e.text, &segs), Some(e.value_span));
                }
            }
            let _ = [0, t.len() / 2, t.len() + 3].map(|b| line_col(t, b));
            let _ = locate(t, &[]);
        };
        for i in (0..=DOC.len()).filter(|&i| DOC.is_char_boundary(i)) {
            probe(DOC.get(..i).unwrap_or(""));
        }
        for (i, _) in DOC.char_indices() {
            for c in ['(', ')', '"', '/', '\'', 'é'] {
                let rest = DOC.get(i + 1..).unwrap_or("");
                probe(&format!("{}{c}{rest}", DOC.get(..i).unwrap_or("")));
            }
        }
    }
}

/// Agreement with the `ron` crate on every shipped file: each leaf that `ron` reads is found by
/// path here, and the text of the span found parses (by `ron`) to the same value.
#[cfg(test)]
mod agreement_with_ron {
    use super::*;
    use ron::Value;

    /// Every (path, leaf value) of a value tree as `ron` reads it.
    fn leaves(v: &Value, path: &mut Vec<Segment>, out: &mut Vec<(Vec<Segment>, Value)>) {
        match v {
            Value::Map(m) => {
                for (k, child) in m.iter() {
                    let Value::String(name) = k else {
                        continue;
                    };
                    path.push(Segment::Field(name.clone()));
                    leaves(child, path, out);
                    path.pop();
                }
            }
            Value::Seq(items) => {
                for (i, child) in items.iter().enumerate() {
                    path.push(Segment::Index(i));
                    leaves(child, path, out);
                    path.pop();
                }
            }
            Value::Option(Some(inner)) => leaves(inner, path, out),
            leaf => out.push((path.clone(), leaf.clone())),
        }
    }

    // Source: RON specification (ron-rs/ron, docs/grammar.md), read by the ron 0.8 crate itself:
    // the reference reader decides what each value is; this module must only find it.
    #[test]
    fn every_leaf_of_every_shipped_file_is_located_where_ron_reads_it() {
        let opts = ron::Options::default()
            .with_default_extension(ron::extensions::Extensions::IMPLICIT_SOME);
        let files = crate::scenario::demo::SETUPS
            .iter()
            .chain(crate::scenario::demo::PROFILES);
        let mut checked = 0;
        for f in files {
            let tree: Value = opts
                .from_str(f.text)
                .unwrap_or_else(|e| panic!("{}: ron reads it: {e}", f.path));
            let mut found = Vec::new();
            leaves(&tree, &mut Vec::new(), &mut found);
            for (path, want) in found {
                let span = locate(f.text, &path)
                    .unwrap_or_else(|| panic!("{}: `{}` not located", f.path, key_name(&path)));
                let got: Value = opts
                    .from_str(&f.text[span.start..span.end])
                    .unwrap_or_else(|e| panic!("{}: `{}` span: {e}", f.path, key_name(&path)));
                assert_eq!(got, want, "{}: `{}`", f.path, key_name(&path));
                checked += 1;
            }
        }
        assert!(checked > 200, "only {checked} leaves checked");
    }
}
