//! The CIF document model: data blocks holding tag-value pairs, loops and save frames.
//!
//! Plain data, in file order, with the line each piece started on. Tags keep the spelling of the
//! file; every look-up by tag ignores case (CIF tags are case-insensitive, `_Cell_Length_A` is
//! `_cell_length_a`). Nothing here knows what a tag means.

/// Which grammar the file was read with (see the [crate] notes for how it is chosen).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Version {
    V1_1,
    V2_0,
}

/// A parsed CIF file.
#[derive(Debug, Clone, PartialEq)]
pub struct Document {
    pub version: Version,
    /// Data blocks in file order (a STAR `global_` block, if any, among them).
    pub blocks: Vec<Block>,
    /// Things that were accepted but are not clean CIF (duplicate tags with equal values,
    /// non-UTF-8 bytes, control characters, ...).
    pub warnings: Vec<CifWarning>,
}

/// A problem that did not stop the parse.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct CifWarning {
    pub line: usize,
    pub column: usize,
    pub message: String,
}

impl std::fmt::Display for CifWarning {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(
            f,
            "line {}, column {}: {}",
            self.line, self.column, self.message
        )
    }
}

/// A data block (`data_NAME`) or a save frame (`save_NAME` ... `save_`).
#[derive(Debug, Clone, PartialEq)]
pub struct Block {
    /// The name after `data_` or `save_`, as written.
    pub name: String,
    /// Pairs and loops in file order.
    pub items: Vec<Item>,
    /// Save frames of this block (always empty for a frame itself: frames do not nest).
    pub frames: Vec<Block>,
    /// Line of the `data_` / `save_` header.
    pub line: usize,
    /// True for a STAR `global_` block (name empty).
    pub global: bool,
    /// Later copies of tags already given in this block with a *different* value. The first
    /// copy is the one in [`Block::items`]; these are kept so that a reader can refuse to pick
    /// one when the tag matters to it (see [`Block::conflicting`]).
    pub duplicates: Vec<Pair>,
}

/// One entry of a block: a single tag with its value, or a loop.
#[derive(Debug, Clone, PartialEq)]
pub enum Item {
    Pair(Pair),
    Loop(Loop),
}

/// `_tag value`.
#[derive(Debug, Clone, PartialEq)]
pub struct Pair {
    pub tag: String,
    pub value: Value,
    /// Line of the tag.
    pub line: usize,
}

/// A `loop_`: a table whose columns are the tags and whose rows are read from the values in
/// row-major order.
#[derive(Debug, Clone, PartialEq)]
pub struct Loop {
    pub tags: Vec<String>,
    /// Row-major: row r, column c is `values[r * tags.len() + c]`.
    pub values: Vec<Value>,
    /// Line of the `loop_` keyword.
    pub line: usize,
}

/// A CIF value.
#[derive(Debug, Clone, PartialEq)]
pub enum Value {
    /// `?`: the value is unknown.
    Unknown,
    /// `.`: the value does not apply.
    Inapplicable,
    /// Any other value. Numbers stay text here; read them with
    /// [`crate::parse_number_with_su`].
    Text {
        text: String,
        /// True when the value was quoted or a text field (so `'?'` is the text "?").
        quoted: bool,
        /// Line where the value starts.
        line: usize,
    },
    /// A CIF 2.0 list `[v1 v2 ...]`.
    List(Vec<Value>),
    /// A CIF 2.0 table `{'key': value ...}`, in file order.
    Table(Vec<(String, Value)>),
}

impl Value {
    /// The text of a [`Value::Text`]; `None` for `?`, `.`, lists and tables.
    pub fn as_str(&self) -> Option<&str> {
        match self {
            Value::Text { text, .. } => Some(text),
            _ => None,
        }
    }

    /// The number and its standard uncertainty, when the value is a CIF number.
    pub fn as_number_with_su(&self) -> Option<(f64, Option<f64>)> {
        self.as_str().and_then(super::parse_number_with_su)
    }

    /// The number without its uncertainty.
    pub fn as_number(&self) -> Option<f64> {
        self.as_number_with_su().map(|(v, _)| v)
    }

    /// True for `?` and `.`.
    pub fn is_null(&self) -> bool {
        matches!(self, Value::Unknown | Value::Inapplicable)
    }

    /// Line where a text value starts (`None` for `?`, `.`, lists and tables).
    pub fn line(&self) -> Option<usize> {
        match self {
            Value::Text { line, .. } => Some(*line),
            _ => None,
        }
    }
}

/// Case-insensitive comparison of two tags (ASCII fast path, full Unicode folding otherwise,
/// since CIF 2.0 tags may be any Unicode).
pub fn tag_eq(a: &str, b: &str) -> bool {
    if a.is_ascii() && b.is_ascii() {
        a.eq_ignore_ascii_case(b)
    } else {
        a.to_lowercase() == b.to_lowercase()
    }
}

impl Document {
    /// The data block called `name` (case-insensitive).
    pub fn block(&self, name: &str) -> Option<&Block> {
        self.blocks
            .iter()
            .find(|b| !b.global && tag_eq(&b.name, name))
    }
}

impl Block {
    /// The value of `tag`, from a pair or from a loop with exactly one row.
    pub fn value(&self, tag: &str) -> Option<&Value> {
        for item in &self.items {
            match item {
                Item::Pair(p) if tag_eq(&p.tag, tag) => return Some(&p.value),
                Item::Loop(l) => {
                    if let Some(c) = l.column(tag) {
                        return if l.row_count() == 1 {
                            l.values.get(c)
                        } else {
                            None
                        };
                    }
                }
                _ => {}
            }
        }
        None
    }

    /// The text of `tag` (see [`Block::value`]); `None` when absent, `?`, `.`, a list or a table.
    pub fn text(&self, tag: &str) -> Option<&str> {
        self.value(tag).and_then(Value::as_str)
    }

    /// The loop that has `tag` among its columns.
    pub fn find_loop(&self, tag: &str) -> Option<&Loop> {
        self.loops().find(|l| l.column(tag).is_some())
    }

    /// Line of the pair or loop that holds `tag`.
    pub fn line_of(&self, tag: &str) -> Option<usize> {
        self.items.iter().find_map(|item| match item {
            Item::Pair(p) if tag_eq(&p.tag, tag) => Some(p.line),
            Item::Loop(l) if l.column(tag).is_some() => Some(l.line),
            _ => None,
        })
    }

    /// All loops of the block, in file order.
    pub fn loops(&self) -> impl Iterator<Item = &Loop> {
        self.items.iter().filter_map(|i| match i {
            Item::Loop(l) => Some(l),
            _ => None,
        })
    }

    /// Later copies of `tag` whose values differ from the first (empty for most tags).
    pub fn conflicting(&self, tag: &str) -> impl Iterator<Item = &Pair> {
        self.duplicates.iter().filter(move |p| tag_eq(&p.tag, tag))
    }

    /// The save frame called `name` (case-insensitive).
    pub fn frame(&self, name: &str) -> Option<&Block> {
        self.frames.iter().find(|f| tag_eq(&f.name, name))
    }
}

impl Loop {
    /// Column index of `tag`.
    pub fn column(&self, tag: &str) -> Option<usize> {
        self.tags.iter().position(|t| tag_eq(t, tag))
    }

    pub fn row_count(&self) -> usize {
        if self.tags.is_empty() {
            0
        } else {
            self.values.len() / self.tags.len()
        }
    }

    /// The rows, each a slice with one value per tag.
    pub fn rows(&self) -> impl Iterator<Item = &[Value]> {
        self.values.chunks_exact(self.tags.len().max(1))
    }

    /// The value in row `row` under `tag`.
    pub fn get(&self, row: usize, tag: &str) -> Option<&Value> {
        let c = self.column(tag)?;
        self.values.get(row * self.tags.len() + c)
    }

    /// Line where row `row` starts (the first text value of the row that knows its line).
    pub fn row_line(&self, row: usize) -> usize {
        let n = self.tags.len().max(1);
        self.values
            .get(row * n..(row + 1) * n)
            .and_then(|r| r.iter().find_map(Value::line))
            .unwrap_or(self.line)
    }
}
