//! The token cursor and builder state shared by the two diagram parsers.

use crate::diagram::{Builder, Span};

/// Tokens with positions, a read position, and the diagram being built.
pub(crate) struct Parser<T> {
    pub(crate) toks: Vec<(T, Span)>,
    pub(crate) pos: usize,
    pub(crate) b: Builder,
}

impl<T: Clone> Parser<T> {
    /// A parser over tokens that end with an end-of-text token.
    pub(crate) fn new(toks: Vec<(T, Span)>) -> Self {
        Parser {
            toks,
            pos: 0,
            b: Builder::default(),
        }
    }

    /// The current token.
    pub(crate) fn peek(&self) -> &(T, Span) {
        &self.toks[self.pos]
    }

    /// Takes the current token; stays on the last (end-of-text) token.
    pub(crate) fn bump(&mut self) -> (T, Span) {
        let t = self.toks[self.pos].clone();
        if self.pos + 1 < self.toks.len() {
            self.pos += 1;
        }
        t
    }
}
