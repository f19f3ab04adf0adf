//! Causal diagrams and identification for upshot.
//!
//! This crate parses a diagram (upshot's edge syntax or DOT), validates it, answers
//! d-separation queries, performs do-surgery, and decides *whether and how* an effect is
//! identified: adjustment sets (validity with reasons, all minimal sets, the optimal set),
//! front-door mediators and instruments (unconditional and conditional). The primary type is
//! [`Diagram`]; [`report::identify`] summarises every route for one question.
//!
//! Key design decision: a latent common cause `a <-> b` is stored as an explicit latent node
//! with edges into `a` and `b`, so that every algorithm runs on a plain DAG and latent nodes are
//! excluded from candidate sets by role, not by special cases.
//!
//! This crate does no I/O and knows nothing of data, SQL or estimators.
#![deny(missing_docs)]

mod cursor;
pub mod dag;
pub mod diagram;
mod dot;
pub mod identify;
pub mod parse;
pub mod report;
pub mod separators;
pub mod set;

pub use dag::{Dag, Dir, Path};
pub use diagram::{Diagram, DiagramError, Kind, Node, Role, Span};
pub use set::NodeSet;
