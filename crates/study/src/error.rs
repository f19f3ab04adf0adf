//! Study errors with positions.

use std::fmt;

/// Where an error is.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Location {
    /// In a file: path as given, 1-based line and column, and the offending line's text.
    File {
        /// The file's path as the user gave it.
        path: String,
        /// Line, from 1.
        line: usize,
        /// Column, from 1.
        col: usize,
        /// The text of that line, for display.
        text: String,
    },
    /// In a command-line flag.
    Flag(String),
    /// A file as a whole (cannot be read).
    Path(String),
}

/// A study that cannot be used, with where and why.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct StudyError {
    /// Where.
    pub location: Location,
    /// The key or section the error is about, when known (`question[1].treatment`).
    pub key: Option<String>,
    /// What is wrong and what is allowed.
    pub message: String,
}

impl std::error::Error for StudyError {}

impl fmt::Display for StudyError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let key = self
            .key
            .as_ref()
            .map(|k| format!("`{k}`: "))
            .unwrap_or_default();
        match &self.location {
            Location::File {
                path,
                line,
                col,
                text,
            } => {
                write!(f, "{path}:{line}:{col}: {key}{}", self.message)?;
                if !text.is_empty() {
                    let gutter = line.to_string().len();
                    write!(
                        f,
                        "\n{:gutter$} |\n{line} | {text}\n{:gutter$} | {:>col$}",
                        "", "", "^"
                    )?;
                }
                Ok(())
            }
            Location::Flag(flag) => write!(f, "{flag}: {key}{}", self.message),
            Location::Path(p) => write!(f, "{p}: {key}{}", self.message),
        }
    }
}

/// Maps byte offsets of a text to 1-based line and column (in characters).
pub(crate) struct Lines<'a> {
    text: &'a str,
    path: String,
}

impl<'a> Lines<'a> {
    pub(crate) fn new(text: &'a str, path: &str) -> Self {
        Lines {
            text,
            path: path.to_string(),
        }
    }

    pub(crate) fn at(&self, offset: usize) -> Location {
        let offset = offset.min(self.text.len());
        let before = &self.text[..offset];
        let line = before.matches('\n').count() + 1;
        let start = before.rfind('\n').map(|i| i + 1).unwrap_or(0);
        let col = self.text[start..offset].chars().count() + 1;
        let end = self.text[start..]
            .find('\n')
            .map(|i| start + i)
            .unwrap_or(self.text.len());
        Location::File {
            path: self.path.clone(),
            line,
            col,
            text: self.text[start..end].trim_end_matches('\r').to_string(),
        }
    }

    /// The location of 1-based (line, col) counted from `offset`'s line start.
    pub(crate) fn relative(&self, offset: usize, line: usize, col: usize) -> Location {
        let mut pos = offset;
        let mut cur_line = 1;
        let bytes = self.text.as_bytes();
        while cur_line < line && pos < bytes.len() {
            if bytes[pos] == b'\n' {
                cur_line += 1;
            }
            pos += 1;
        }
        let mut c = 1;
        let mut it = self.text[pos..].char_indices();
        while c < col {
            match it.next() {
                Some((_, '\n')) | None => break,
                Some(_) => c += 1,
            }
        }
        let off = it.next().map(|(i, _)| pos + i).unwrap_or(self.text.len());
        self.at(off)
    }

    pub(crate) fn error(&self, offset: usize, key: Option<String>, message: String) -> StudyError {
        StudyError {
            location: self.at(offset),
            key,
            message,
        }
    }
}

/// The closest candidate to `word` by edit distance, if it is close enough to suggest.
pub(crate) fn did_you_mean<'a, I: IntoIterator<Item = &'a str>>(
    word: &str,
    candidates: I,
) -> Option<&'a str> {
    fn dist(a: &str, b: &str) -> usize {
        let b: Vec<char> = b.chars().collect();
        let mut prev: Vec<usize> = (0..=b.len()).collect();
        for (i, ca) in a.chars().enumerate() {
            let mut cur = vec![i + 1; b.len() + 1];
            for (j, cb) in b.iter().enumerate() {
                cur[j + 1] = (prev[j] + usize::from(ca != *cb))
                    .min(prev[j + 1] + 1)
                    .min(cur[j] + 1);
            }
            prev = cur;
        }
        prev[b.len()]
    }
    candidates
        .into_iter()
        .map(|c| (dist(&word.to_lowercase(), &c.to_lowercase()), c))
        .filter(|(d, c)| *d <= 2.max(c.chars().count() / 4))
        .min()
        .map(|(_, c)| c)
}
