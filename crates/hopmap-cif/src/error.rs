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
    /// `file:line:column: context: message`, leaving out what is unknown.
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.file)?;
        if let Some(l) = self.line {
            write!(f, ":{l}")?;
            if let Some(c) = self.column {
                write!(f, ":{c}")?;
            }
        }
        if let Some(c) = &self.context {
            write!(f, ": {c}")?;
        }
        write!(f, ": {}", self.message)
    }
}

impl std::error::Error for InputError {}

#[cfg(test)]
mod tests {
    use super::*;
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
