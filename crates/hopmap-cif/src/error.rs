//! Errors that are values with a place: the file, and where in it (line and column, or a data
//! block and site label), and a plain sentence.

use std::fmt;

/// A problem with an input file that stops it from being read.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct InputError {
    /// The file as the user named it.
    pub file: String,
    pub line: Option<usize>,
    pub column: Option<usize>,
    /// Where inside the file in words, e.g. "data block 'LiFePO4', site 'Li1'".
    pub context: Option<String>,
    pub message: String,
}

impl InputError {
    pub fn new(file: impl Into<String>, message: impl Into<String>) -> Self {
        InputError {
            file: file.into(),
            line: None,
            column: None,
            context: None,
            message: message.into(),
        }
    }
    pub fn at(mut self, line: usize, column: usize) -> Self {
        self.line = Some(line);
        self.column = Some(column);
        self
    }
    pub fn at_line(mut self, line: usize) -> Self {
        self.line = Some(line);
        self
    }
    pub fn context(mut self, context: impl Into<String>) -> Self {
        self.context = Some(context.into());
        self
    }
}

impl fmt::Display for InputError {
    /// `file:line:column: context: message`, leaving out what is unknown. Control characters
    /// (terminal escape codes from a file's names or values) are shown escaped, never sent.
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", printable(&self.file))?;
        if let Some(l) = self.line {
            write!(f, ":{l}")?;
            if let Some(c) = self.column {
                write!(f, ":{c}")?;
            }
        }
        if let Some(c) = &self.context {
            write!(f, ": {}", printable(c))?;
        }
        write!(f, ": {}", printable(&self.message))
    }
}

/// The text with every control character (C0, DEL, C1: terminal escape codes among them)
/// written as a `\u{..}` escape, so that names read from a file cannot drive a terminal.
pub fn printable(s: &str) -> std::borrow::Cow<'_, str> {
    if !s.chars().any(char::is_control) {
        return std::borrow::Cow::Borrowed(s);
    }
    std::borrow::Cow::Owned(
        s.chars()
            .map(|c| {
                if c.is_control() {
                    format!("\\u{{{:x}}}", c as u32)
                } else {
                    c.to_string()
                }
            })
            .collect(),
    )
}

impl std::error::Error for InputError {}

#[cfg(test)]
mod tests {
    use super::*;
    #[test]
    fn escape_codes_are_shown_not_sent() {
        let e = InputError::new("a.cif", "no cell").context("data block 'x\u{1b}[2Jy'");
        assert_eq!(e.to_string(), "a.cif: data block 'x\\u{1b}[2Jy': no cell");
    }
    #[test]
    fn names_file_line_column_and_context() {
        let e = InputError::new("a.cif", "expected a value after the tag")
            .at(12, 5)
            .context("data block 'x'");
        assert_eq!(
            e.to_string(),
            "a.cif:12:5: data block 'x': expected a value after the tag"
        );
    }
}
