//! Study files for upshot: parse and validate the declaration of a source, a causal diagram
//! and the questions to answer.
//!
//! A study is TOML (see `docs/study-files.md`). The primary type is [`Study`]; it is built from
//! a file ([`Study::load`]), from text ([`Study::parse`]) or from command-line pieces
//! ([`Study::from_parts`]). Every error is a [`StudyError`] that names the file, line, column
//! and key (or the flag) and says what is allowed.
//!
//! Key design decision: values are deserialised with their spans, and all checks against the
//! diagram happen here, once, so later stages can assume that every name in a question is an
//! observed variable of the diagram and that sets are disjoint. Column names are checked
//! against the source's schema later, by the engine.
//!
//! This crate reads the study file and the diagram file it names; it runs no query.
#![deny(missing_docs)]

mod error;
mod model;
mod raw;

pub use error::{Location, StudyError};
pub use model::{
    looks_like_diagram, Estimand, Method, Question, QuestionInput, Route, Rows, SourceSection,
    Spelling, Study,
};
