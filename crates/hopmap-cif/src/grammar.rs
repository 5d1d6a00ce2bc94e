//! The CIF grammar: bytes to [`Document`].
//!
//! A lexer built from small `nom` parsers cuts the text into tokens (tags, keywords, values and
//! the CIF 2.0 brackets); a recursive-descent reader assembles blocks, frames, pairs and loops
//! from them. Every token consumes at least one character, and list/table nesting is limited to
//! [`MAX_DEPTH`] levels, so any input ends in a document or an error without panicking, and in
//! time linear in its length.
//!
//! The quoting rules, decided per file (see the [crate] notes for the rest):
//!
//! - CIF 1.1: `'...'` and `"..."` end at the first matching quote that is followed by white space
//!   or the end of the file, and never span lines: `'O'Neil'` is the text `O'Neil`.
//! - CIF 2.0: a quote ends at the first matching quote; `'''...'''` and `"""..."""` may span
//!   lines; `[ ]` and `{ }` hold lists and tables, table keys are quoted strings followed at once
//!   by `:`; unquoted words end at white space or a bracket.
//! - Both: a `;` at the start of a line opens a text field that ends at the next line starting
//!   with `;`; `#` after white space starts a comment to the end of the line.

use super::document::{Block, CifWarning, Document, Item, Loop, Pair, Value, Version, tag_eq};
use crate::error::InputError;
use nom::IResult;
use nom::bytes::complete::{tag_no_case, take_till, take_while};
use std::borrow::Cow;
use std::collections::HashMap;
use std::fmt;

/// Deepest nesting of CIF 2.0 lists and tables accepted.
pub const MAX_DEPTH: usize = 64;

/// Why a file is not CIF, and where: line and column (both from 1, columns in characters).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct CifError {
    pub line: usize,
    pub column: usize,
    pub message: String,
}

impl fmt::Display for CifError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "line {}, column {}: {}",
            self.line, self.column, self.message
        )
    }
}

impl std::error::Error for CifError {}

impl CifError {
    /// The same error as an [`InputError`] naming `file`.
    pub fn into_input_error(self, file: &str) -> InputError {
        InputError::new(file, self.message).at(self.line, self.column)
    }
}

/// Parses CIF text (CIF 1.1, or CIF 2.0 when the file starts with `#\#CIF_2.0`).
pub fn parse(text: &[u8]) -> Result<Document, CifError> {
    let mut warnings = Vec::new();
    let text = text.strip_prefix(b"\xEF\xBB\xBF").unwrap_or(text);
    let decoded: Cow<str> = match std::str::from_utf8(text) {
        Ok(s) => Cow::Borrowed(s),
        Err(e) => {
            let good = &text[..e.valid_up_to()];
            let line = 1 + good.iter().filter(|&&b| b == b'\n').count();
            let col_start = good.iter().rposition(|&b| b == b'\n').map_or(0, |p| p + 1);
            let column = 1 + String::from_utf8_lossy(&good[col_start..]).chars().count();
            warnings.push(CifWarning {
                line,
                column,
                message: "the file is not valid UTF-8; bytes that are not were replaced by U+FFFD"
                    .into(),
            });
            Cow::Owned(String::from_utf8_lossy(text).into_owned())
        }
    };
    let src: Cow<str> = if decoded.contains('\r') {
        Cow::Owned(decoded.replace("\r\n", "\n").replace('\r', "\n"))
    } else {
        decoded
    };
    let version = if src.starts_with("#\\#CIF_2.0") {
        Version::V2_0
    } else {
        Version::V1_1
    };
    let mut reader = Reader {
        lex: Lexer::new(&src, version == Version::V2_0),
        peeked: None,
        warnings,
    };
    let blocks = reader.document()?;
    let mut warnings = reader.warnings;
    warnings.append(&mut reader.lex.warnings);
    warnings.sort_by_key(|w| (w.line, w.column));
    Ok(Document {
        version,
        blocks,
        warnings,
    })
}

// ---------------------------------------------------------------------------------------------
// Lexer

#[derive(Debug, Clone, PartialEq)]
enum Tok<'a> {
    Tag(&'a str),
    /// `data_NAME`
    Data(&'a str),
    /// `save_NAME`, or `save_` (empty) closing a frame
    Save(&'a str),
    Loop,
    Global,
    Stop,
    /// An unquoted value.
    Bare(&'a str),
    /// A quoted string or a text field.
    Quoted(Cow<'a, str>),
    /// A CIF 2.0 table key: a quoted string followed by `:`.
    Key(&'a str),
    ListOpen,
    ListClose,
    TableOpen,
    TableClose,
    Eof,
}

#[derive(Debug, Clone)]
struct Token<'a> {
    tok: Tok<'a>,
    /// Byte offset of the first character.
    pos: usize,
}

struct Lexer<'a> {
    src: &'a str,
    pos: usize,
    cif2: bool,
    /// Byte offsets where lines start.
    line_starts: Vec<usize>,
    /// Index into `line_starts` of the last line asked for.
    line_hint: std::cell::Cell<usize>,
    warnings: Vec<CifWarning>,
    warned_control: bool,
}

fn is_ws(c: char) -> bool {
    c == ' ' || c == '\t' || c == '\n'
}

fn is_bracket(c: char) -> bool {
    matches!(c, '[' | ']' | '{' | '}')
}

/// Blanks: spaces, tabs, newlines.
fn blanks(i: &str) -> IResult<&str, &str> {
    take_while(is_ws)(i)
}

/// A comment, `#` to the end of the line (the newline is left for [`blanks`]).
fn comment(i: &str) -> IResult<&str, &str> {
    let (rest, _) = nom::character::complete::char('#')(i)?;
    take_till(|c| c == '\n')(rest)
}

/// An unquoted word: everything up to white space (CIF 1.1) or white space and brackets
/// (CIF 2.0).
fn word(cif2: bool) -> impl Fn(&str) -> IResult<&str, &str> {
    move |i| {
        if cif2 {
            take_till(|c| is_ws(c) || is_bracket(c))(i)
        } else {
            take_till(is_ws)(i)
        }
    }
}

/// A reserved word at the start of `w`, case-insensitive: `tag_no_case` on the prefix.
fn keyword<'a>(kw: &'static str, w: &'a str) -> Option<&'a str> {
    // cheap rejection before the case-insensitive comparison
    if !w
        .as_bytes()
        .first()?
        .eq_ignore_ascii_case(&kw.as_bytes()[0])
    {
        return None;
    }
    let r: IResult<&str, &str> = tag_no_case(kw)(w);
    r.ok().map(|(rest, _)| rest)
}

impl<'a> Lexer<'a> {
    fn new(src: &'a str, cif2: bool) -> Self {
        let mut line_starts = vec![0];
        line_starts.extend(
            src.bytes()
                .enumerate()
                .filter(|(_, b)| *b == b'\n')
                .map(|(i, _)| i + 1),
        );
        Lexer {
            src,
            pos: 0,
            cif2,
            line_starts,
            line_hint: std::cell::Cell::new(0),
            warnings: Vec::new(),
            warned_control: false,
        }
    }

    /// Line of a byte offset. Queries come mostly in file order, so the search starts from the
    /// line of the previous query and walks forward; anything earlier is a binary search.
    fn line_of(&self, pos: usize) -> usize {
        let ls = &self.line_starts;
        let mut i = self.line_hint.get();
        if ls[i] > pos {
            i = ls.partition_point(|&s| s <= pos) - 1;
        } else {
            while i + 1 < ls.len() && ls[i + 1] <= pos {
                i += 1;
            }
        }
        self.line_hint.set(i);
        i + 1
    }

    fn line_col(&self, pos: usize) -> (usize, usize) {
        let line = self.line_of(pos);
        let start = self.line_starts[line - 1];
        let col = self
            .src
            .get(start..pos)
            .map_or(pos - start, |s| s.chars().count());
        (line, col + 1)
    }

    fn error(&self, pos: usize, message: impl Into<String>) -> CifError {
        let (line, column) = self.line_col(pos);
        CifError {
            line,
            column,
            message: message.into(),
        }
    }

    fn warn(&mut self, pos: usize, message: impl Into<String>) {
        let (line, column) = self.line_col(pos);
        self.warnings.push(CifWarning {
            line,
            column,
            message: message.into(),
        });
    }

    fn rest(&self) -> &'a str {
        &self.src[self.pos..]
    }

    fn at_line_start(&self, pos: usize) -> bool {
        pos == 0 || self.src.as_bytes()[pos - 1] == b'\n'
    }

    /// Skips blanks, comments and stray Ctrl-Z characters.
    fn skip_blank(&mut self) {
        loop {
            let before = self.pos;
            if let Ok((rest, _)) = blanks(self.rest()) {
                self.pos = self.src.len() - rest.len();
            }
            if let Ok((rest, _)) = comment(self.rest()) {
                self.pos = self.src.len() - rest.len();
            }
            if self.rest().starts_with('\u{1a}') {
                let tail = &self.rest()[1..];
                if !tail.chars().all(|c| is_ws(c) || c == '\u{1a}') {
                    self.warn(
                        self.pos,
                        "Ctrl-Z (0x1A, an old end-of-file mark) inside the file, read as white space",
                    );
                }
                self.pos += 1;
            }
            if self.pos == before {
                return;
            }
        }
    }

    /// Warns once per file about control characters inside a value.
    fn check_control(&mut self, pos: usize, s: &str) {
        if self.warned_control {
            return;
        }
        if let Some((off, c)) = s
            .char_indices()
            .find(|&(_, c)| c.is_control() && c != '\t' && c != '\n')
        {
            self.warned_control = true;
            self.warn(
                pos + off,
                format!(
                    "control character U+{:04X} inside a value (CIF allows none); kept as written",
                    c as u32
                ),
            );
        }
    }

    fn next(&mut self) -> Result<Token<'a>, CifError> {
        self.skip_blank();
        let pos = self.pos;
        let rest = self.rest();
        let Some(c) = rest.chars().next() else {
            return Ok(Token { tok: Tok::Eof, pos });
        };
        let tok = match c {
            ';' if self.at_line_start(pos) => self.text_field(pos)?,
            '\'' | '"' => self.quoted(pos, c)?,
            '[' if self.cif2 => {
                self.pos += 1;
                Tok::ListOpen
            }
            ']' if self.cif2 => {
                self.pos += 1;
                Tok::ListClose
            }
            '{' if self.cif2 => {
                self.pos += 1;
                Tok::TableOpen
            }
            '}' if self.cif2 => {
                self.pos += 1;
                Tok::TableClose
            }
            _ => {
                let (after, w) = if c == '_' {
                    take_till::<_, _, nom::error::Error<&str>>(is_ws)(rest)
                        .map_err(|_| self.error(pos, "cannot read a tag"))?
                } else {
                    word(self.cif2)(rest).map_err(|_| self.error(pos, "cannot read a value"))?
                };
                self.pos = self.src.len() - after.len();
                if c == '_' {
                    Tok::Tag(w)
                } else if let Some(name) = keyword("data_", w) {
                    if name.is_empty() {
                        return Err(self.error(pos, "'data_' must be followed by a block name"));
                    }
                    Tok::Data(name)
                } else if let Some(name) = keyword("save_", w) {
                    Tok::Save(name)
                } else if w.eq_ignore_ascii_case("loop_") {
                    Tok::Loop
                } else if w.eq_ignore_ascii_case("global_") {
                    Tok::Global
                } else if w.eq_ignore_ascii_case("stop_") {
                    Tok::Stop
                } else {
                    self.check_control(pos, w);
                    Tok::Bare(w)
                }
            }
        };
        debug_assert!(self.pos > pos, "every token consumes input");
        Ok(Token { tok, pos })
    }

    fn text_field(&mut self, pos: usize) -> Result<Tok<'a>, CifError> {
        let body_start = pos + 1;
        let body = &self.src[body_start..];
        let Some(end) = body.find("\n;") else {
            return Err(self.error(
                pos,
                "unterminated text field: no line starting with ';' closes the field opened here",
            ));
        };
        let mut content = &body[..end];
        // The opening line usually holds nothing but the ';'.
        if let Some(first_nl) = content.find('\n') {
            if content[..first_nl].trim().is_empty() {
                content = &content[first_nl + 1..];
            }
        } else if content.trim().is_empty() {
            content = "";
        }
        self.check_control(body_start, content);
        self.pos = body_start + end + 2;
        if let Some(c) = self.rest().chars().next()
            && !is_ws(c)
            && c != '#'
        {
            self.warn(
                self.pos,
                "the ';' closing a text field should be followed by white space",
            );
        }
        Ok(Tok::Quoted(Cow::Borrowed(content)))
    }

    fn quoted(&mut self, pos: usize, q: char) -> Result<Tok<'a>, CifError> {
        let rest = self.rest();
        let name = if q == '\'' { "single" } else { "double" };
        if self.cif2 {
            let triple: &str = if q == '\'' { "'''" } else { "\"\"\"" };
            let (body_off, content, consumed) = if rest.starts_with(triple) {
                let body = &rest[3..];
                let Some(end) = body.find(triple) else {
                    return Err(self.error(
                        pos,
                        format!("unterminated triple-quoted string: no closing {triple}"),
                    ));
                };
                (3, &body[..end], 3 + end + 3)
            } else {
                let body = &rest[1..];
                let Some(end) = body.find([q, '\n']) else {
                    return Err(self.error(
                        pos,
                        format!("unterminated {name}-quoted string: no closing {q} on this line"),
                    ));
                };
                if body.as_bytes()[end] == b'\n' {
                    return Err(self.error(
                        pos,
                        format!("unterminated {name}-quoted string: no closing {q} on this line"),
                    ));
                }
                (1, &body[..end], 1 + end + 1)
            };
            self.check_control(pos + body_off, content);
            self.pos = pos + consumed;
            match self.rest().chars().next() {
                Some(':') => {
                    self.pos += 1;
                    return Ok(Tok::Key(content));
                }
                None => {}
                Some(c) if is_ws(c) || is_bracket(c) => {}
                Some(c) => {
                    return Err(self.error(
                        self.pos,
                        format!(
                            "expected white space after the closing quote, found '{c}' \
                             (in CIF 2.0 a quote cannot be part of a string with the same quote)"
                        ),
                    ));
                }
            }
            return Ok(Tok::Quoted(Cow::Borrowed(content)));
        }
        // CIF 1.1: the string ends at a quote followed by white space or the end of the file.
        let body = &rest[1..];
        let line_end = body.find('\n').unwrap_or(body.len());
        let line = &body[..line_end];
        let mut search = 0;
        while let Some(off) = line[search..].find(q) {
            let at = search + off;
            let next = line[at + 1..].chars().next();
            if next.is_none_or(is_ws) {
                let content = &line[..at];
                self.check_control(pos + 1, content);
                self.pos = pos + 1 + at + 1;
                return Ok(Tok::Quoted(Cow::Borrowed(content)));
            }
            search = at + 1;
        }
        Err(self.error(
            pos,
            format!(
                "unterminated {name}-quoted string: no closing {q} followed by white space on \
                 this line"
            ),
        ))
    }
}

// ---------------------------------------------------------------------------------------------
// Reader: tokens to blocks

struct Reader<'a> {
    lex: Lexer<'a>,
    peeked: Option<Token<'a>>,
    warnings: Vec<CifWarning>,
}

/// A block or frame being filled, with the index used to find duplicate tags.
struct Builder {
    block: Block,
    /// Lower-case tag -> (line, item index, column in the loop or None for a pair).
    seen: HashMap<String, (usize, usize, Option<usize>)>,
}

impl Builder {
    fn new(name: &str, line: usize, global: bool) -> Self {
        Builder {
            block: Block {
                name: name.to_string(),
                items: Vec::new(),
                frames: Vec::new(),
                line,
                global,
                duplicates: Vec::new(),
            },
            seen: HashMap::new(),
        }
    }
}

fn describe(tok: &Tok) -> String {
    match tok {
        Tok::Tag(t) => format!("the tag '{t}'"),
        Tok::Data(n) => format!("the data block header 'data_{n}'"),
        Tok::Save("") => "'save_'".into(),
        Tok::Save(n) => format!("the save frame header 'save_{n}'"),
        Tok::Loop => "'loop_'".into(),
        Tok::Global => "'global_'".into(),
        Tok::Stop => "'stop_'".into(),
        Tok::Bare(v) => format!("the value '{}'", short(v)),
        Tok::Quoted(v) => format!("the quoted value '{}'", short(v)),
        Tok::Key(k) => format!("the table key '{}':", short(k)),
        Tok::ListOpen => "'['".into(),
        Tok::ListClose => "']'".into(),
        Tok::TableOpen => "'{'".into(),
        Tok::TableClose => "'}'".into(),
        Tok::Eof => "the end of the file".into(),
    }
}

fn short(s: &str) -> String {
    let mut out: String = s.chars().take(40).collect();
    if s.chars().nth(40).is_some() {
        out.push_str("...");
    }
    out.replace('\n', " ")
}

fn starts_value(tok: &Tok) -> bool {
    matches!(
        tok,
        Tok::Bare(_) | Tok::Quoted(_) | Tok::ListOpen | Tok::TableOpen
    )
}

impl<'a> Reader<'a> {
    fn next(&mut self) -> Result<Token<'a>, CifError> {
        match self.peeked.take() {
            Some(t) => Ok(t),
            None => self.lex.next(),
        }
    }

    fn peek(&mut self) -> Result<&Token<'a>, CifError> {
        if self.peeked.is_none() {
            self.peeked = Some(self.lex.next()?);
        }
        Ok(self.peeked.as_ref().expect("just filled"))
    }

    fn line(&self, pos: usize) -> usize {
        self.lex.line_of(pos)
    }

    fn warn(&mut self, pos: usize, message: impl Into<String>) {
        let (line, column) = self.lex.line_col(pos);
        self.warnings.push(CifWarning {
            line,
            column,
            message: message.into(),
        });
    }

    fn document(&mut self) -> Result<Vec<Block>, CifError> {
        let mut blocks: Vec<Block> = Vec::new();
        let mut block: Option<Builder> = None;
        let mut frame: Option<(Builder, usize)> = None;
        loop {
            let t = self.next()?;
            match t.tok {
                Tok::Eof => {
                    if let Some((f, fpos)) = frame.take() {
                        return Err(self.lex.error(
                            fpos,
                            format!(
                                "save frame '{}' is not closed: 'save_' expected before the end of \
                                 the file",
                                f.block.name
                            ),
                        ));
                    }
                    if let Some(b) = block.take() {
                        blocks.push(b.block);
                    }
                    return Ok(blocks);
                }
                Tok::Data(_) | Tok::Global => {
                    if let Some((f, fpos)) = frame.take() {
                        return Err(self.lex.error(
                            fpos,
                            format!(
                                "save frame '{}' is not closed: 'save_' expected before the next \
                                 block at line {}",
                                f.block.name,
                                self.line(t.pos)
                            ),
                        ));
                    }
                    if let Some(b) = block.take() {
                        blocks.push(b.block);
                    }
                    let line = self.line(t.pos);
                    if let Tok::Data(name) = t.tok {
                        if let Some(prev) =
                            blocks.iter().find(|b| !b.global && tag_eq(&b.name, name))
                        {
                            let msg = format!(
                                "data block name '{name}' is used twice (first at line {})",
                                prev.line
                            );
                            self.warn(t.pos, msg);
                        }
                        block = Some(Builder::new(name, line, false));
                    } else {
                        self.warn(
                            t.pos,
                            "'global_' (a STAR global block) is not allowed in CIF; its items are kept",
                        );
                        block = Some(Builder::new("", line, true));
                    }
                }
                Tok::Save(name) => {
                    let Some(b) = block.as_mut() else {
                        return Err(self.lex.error(
                            t.pos,
                            "save frame outside a data block (expected 'data_' first)",
                        ));
                    };
                    if name.is_empty() {
                        match frame.take() {
                            Some((f, _)) => b.block.frames.push(f.block),
                            None => {
                                return Err(self.lex.error(
                                    t.pos,
                                    "'save_' closes a save frame, but none is open",
                                ));
                            }
                        }
                    } else {
                        if let Some((f, _)) = &frame {
                            return Err(self.lex.error(
                                t.pos,
                                format!(
                                    "save frame 'save_{name}' opened inside save frame '{}' \
                                     (frames do not nest; close it with 'save_')",
                                    f.block.name
                                ),
                            ));
                        }
                        frame = Some((Builder::new(name, self.line(t.pos), false), t.pos));
                    }
                }
                Tok::Tag(tag) => {
                    if block.is_none() {
                        return Err(self.lex.error(
                            t.pos,
                            format!(
                                "tag '{tag}' before any data block (expected 'data_NAME' first)"
                            ),
                        ));
                    }
                    let nt = self.peek()?;
                    if !starts_value(&nt.tok) {
                        let found = describe(&nt.tok);
                        return Err(self.lex.error(
                            t.pos,
                            format!("tag '{tag}' has no value: expected a value, found {found}"),
                        ));
                    }
                    let value = self.value(0)?;
                    let line = self.line(t.pos);
                    if let Some(target) = current(&mut frame, &mut block) {
                        Self::add_pair(
                            &self.lex,
                            &mut self.warnings,
                            target,
                            tag,
                            value,
                            line,
                            t.pos,
                        )?;
                    }
                }
                Tok::Loop => {
                    if block.is_none() {
                        return Err(self.lex.error(
                            t.pos,
                            "'loop_' before any data block (expected 'data_NAME' first)",
                        ));
                    }
                    let l = self.read_loop(t.pos)?;
                    if let Some(target) = current(&mut frame, &mut block) {
                        self.add_loop(target, l, t.pos)?;
                    }
                }
                Tok::Stop => {
                    return Err(self.lex.error(
                        t.pos,
                        "'stop_' is a reserved word (STAR nested loops are not part of CIF); \
                         quote it if it is a value",
                    ));
                }
                other => {
                    let mut what = describe(&other);
                    if let Tok::Bare(w) = &other {
                        let lw = w.to_ascii_lowercase();
                        if ["loop_", "global_", "stop_"]
                            .iter()
                            .any(|k| lw.starts_with(k))
                        {
                            what.push_str(
                                " (a reserved word must be followed by white space; quote the \
                                 value if it is one)",
                            );
                        }
                    }
                    let msg = if block.is_none() {
                        format!("{what} before any data block (expected 'data_NAME' first)")
                    } else {
                        format!(
                            "{what} has no tag: expected a tag starting with '_', 'loop_', \
                             'data_' or 'save_'"
                        )
                    };
                    return Err(self.lex.error(t.pos, msg));
                }
            }
        }
    }

    fn add_pair(
        lex: &Lexer,
        warnings: &mut Vec<CifWarning>,
        b: &mut Builder,
        tag: &str,
        value: Value,
        line: usize,
        pos: usize,
    ) -> Result<(), CifError> {
        let key = tag.to_lowercase();
        if let Some(&(first_line, idx, col)) = b.seen.get(&key) {
            let same = match (&b.block.items[idx], col) {
                (Item::Pair(p), None) => same_value(&p.value, &value),
                _ => false,
            };
            if col.is_some() {
                return Err(lex.error(
                    pos,
                    format!(
                        "tag '{tag}' appears twice in block '{}': in the loop at line \
                         {first_line} and here",
                        b.block.name
                    ),
                ));
            }
            let (l, c) = lex.line_col(pos);
            let message = if same {
                format!(
                    "tag '{tag}' repeats line {first_line} with the same value; the repeat is ignored"
                )
            } else {
                b.block.duplicates.push(Pair {
                    tag: tag.to_string(),
                    value,
                    line,
                });
                format!(
                    "tag '{tag}' is given again with a different value (first at line \
                     {first_line}); the first value is kept"
                )
            };
            warnings.push(CifWarning {
                line: l,
                column: c,
                message,
            });
            return Ok(());
        }
        b.seen.insert(key, (line, b.block.items.len(), None));
        b.block.items.push(Item::Pair(Pair {
            tag: tag.to_string(),
            value,
            line,
        }));
        Ok(())
    }

    fn add_loop(&mut self, b: &mut Builder, l: Loop, pos: usize) -> Result<(), CifError> {
        let idx = b.block.items.len();
        for (c, tag) in l.tags.iter().enumerate() {
            let key = tag.to_lowercase();
            if let Some(&(first_line, ..)) = b.seen.get(&key) {
                return Err(self.lex.error(
                    pos,
                    format!(
                        "tag '{tag}' of the loop at line {} appears twice in block '{}' (first at \
                         line {first_line})",
                        l.line, b.block.name
                    ),
                ));
            }
            b.seen.insert(key, (l.line, idx, Some(c)));
        }
        b.block.items.push(Item::Loop(l));
        Ok(())
    }

    fn read_loop(&mut self, pos: usize) -> Result<Loop, CifError> {
        let line = self.line(pos);
        let mut tags: Vec<String> = Vec::new();
        while let Tok::Tag(t) = self.peek()?.tok {
            tags.push(t.to_string());
            self.next()?;
        }
        if tags.is_empty() {
            let found = describe(&self.peek()?.tok);
            return Err(self.lex.error(
                pos,
                format!("loop_ at line {line} has no tags: expected a tag, found {found}"),
            ));
        }
        let mut values = Vec::new();
        while starts_value(&self.peek()?.tok) {
            values.push(self.value(0)?);
        }
        if values.is_empty() {
            self.warn(pos, format!("loop_ at line {line} has tags but no values"));
        }
        if values.len() % tags.len() != 0 {
            let n = tags.len();
            let rows = values.len() / n;
            return Err(self.lex.error(
                pos,
                format!(
                    "loop_ at line {line} has {n} tags but {} values, not a multiple of {n}: \
                     {} full rows and {} values left over",
                    values.len(),
                    rows,
                    values.len() - rows * n
                ),
            ));
        }
        Ok(Loop { tags, values, line })
    }

    /// Reads one value; `depth` counts the enclosing lists and tables.
    fn value(&mut self, depth: usize) -> Result<Value, CifError> {
        let t = self.next()?;
        let line = self.line(t.pos);
        match t.tok {
            Tok::Bare("?") => Ok(Value::Unknown),
            Tok::Bare(".") => Ok(Value::Inapplicable),
            Tok::Bare(s) => Ok(Value::Text {
                text: s.to_string(),
                quoted: false,
                line,
            }),
            Tok::Quoted(s) => Ok(Value::Text {
                text: s.into_owned(),
                quoted: true,
                line,
            }),
            Tok::ListOpen | Tok::TableOpen if depth >= MAX_DEPTH => Err(self.lex.error(
                t.pos,
                format!("lists and tables nested more than {MAX_DEPTH} deep"),
            )),
            Tok::ListOpen => {
                let mut items = Vec::new();
                loop {
                    let p = self.peek()?;
                    if p.tok == Tok::ListClose {
                        self.next()?;
                        return Ok(Value::List(items));
                    }
                    if !starts_value(&p.tok) {
                        let found = describe(&p.tok);
                        let ppos = p.pos;
                        let (l, c) = self.lex.line_col(t.pos);
                        return Err(self.lex.error(
                            ppos,
                            format!(
                                "expected a list value or ']' closing the list opened at line \
                                 {l}, column {c}; found {found}"
                            ),
                        ));
                    }
                    items.push(self.value(depth + 1)?);
                }
            }
            Tok::TableOpen => {
                let mut entries = Vec::new();
                loop {
                    let p = self.next()?;
                    match p.tok {
                        Tok::TableClose => return Ok(Value::Table(entries)),
                        Tok::Key(k) => {
                            let key = k.to_string();
                            let nt = self.peek()?;
                            if !starts_value(&nt.tok) {
                                let found = describe(&nt.tok);
                                let npos = nt.pos;
                                return Err(self.lex.error(
                                    npos,
                                    format!("table key '{key}' has no value; found {found}"),
                                ));
                            }
                            let v = self.value(depth + 1)?;
                            entries.push((key, v));
                        }
                        other => {
                            let (l, c) = self.lex.line_col(t.pos);
                            return Err(self.lex.error(
                                p.pos,
                                format!(
                                    "expected a quoted key followed by ':' or '}}' closing the \
                                     table opened at line {l}, column {c}; found {}",
                                    describe(&other)
                                ),
                            ));
                        }
                    }
                }
            }
            other => Err(self.lex.error(
                t.pos,
                format!("expected a value, found {}", describe(&other)),
            )),
        }
    }
}

/// The frame being read, else the block.
fn current<'b>(
    frame: &'b mut Option<(Builder, usize)>,
    block: &'b mut Option<Builder>,
) -> Option<&'b mut Builder> {
    match frame {
        Some((f, _)) => Some(f),
        None => block.as_mut(),
    }
}

fn same_value(a: &Value, b: &Value) -> bool {
    match (a, b) {
        (Value::Text { text: x, .. }, Value::Text { text: y, .. }) => x == y,
        (Value::List(x), Value::List(y)) => {
            x.len() == y.len() && x.iter().zip(y).all(|(p, q)| same_value(p, q))
        }
        (Value::Table(x), Value::Table(y)) => {
            x.len() == y.len()
                && x.iter()
                    .zip(y)
                    .all(|((k1, v1), (k2, v2))| k1 == k2 && same_value(v1, v2))
        }
        _ => a == b,
    }
}
