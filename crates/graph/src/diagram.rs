//! Named causal diagrams: nodes with roles and kinds over a [`Dag`].

use crate::dag::{Dag, Dir, Path};
use crate::set::NodeSet;
use std::collections::HashMap;
use std::fmt;

/// A pair of node indices: a directed edge `(from, to)` or a confounded pair.
pub type Edge = (usize, usize);

/// A 1-based position in the diagram text.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default, serde::Serialize)]
pub struct Span {
    /// Line, from 1.
    pub line: usize,
    /// Column in characters, from 1.
    pub col: usize,
}

/// Whether a variable is recorded in the data.
#[derive(Clone, Copy, Debug, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Role {
    /// A column of the source (the default).
    Observed,
    /// Not recorded: it may appear on paths but never in an adjustment set or an estimator.
    Latent,
}

/// The measurement scale of a variable, as far as the diagram declares it.
#[derive(Clone, Copy, Debug, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Kind {
    /// Not declared; later stages infer it from the data.
    Unspecified,
    /// Two values (0/1).
    Binary,
    /// Unordered levels.
    Categorical,
    /// Ordered levels.
    Ordinal,
    /// Non-negative integers.
    Count,
    /// Real-valued.
    Continuous,
}

impl Kind {
    /// The word that declares this kind in a diagram.
    pub fn word(self) -> &'static str {
        match self {
            Kind::Unspecified => "unspecified",
            Kind::Binary => "binary",
            Kind::Categorical => "categorical",
            Kind::Ordinal => "ordinal",
            Kind::Count => "count",
            Kind::Continuous => "continuous",
        }
    }
}

/// The words allowed after `name:` in a declaration.
pub const ATTRIBUTE_WORDS: &[&str] = &[
    "observed",
    "latent",
    "binary",
    "categorical",
    "ordinal",
    "count",
    "continuous",
];

/// One variable of a diagram.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Node {
    /// Its name: a column name for observed nodes.
    pub name: String,
    /// Observed or latent.
    pub role: Role,
    /// Declared scale.
    pub kind: Kind,
    /// For the latent node standing in for `a <-> b`: the pair it connects.
    pub confounds: Option<(usize, usize)>,
    /// Where it first appears.
    pub span: Span,
}

/// Errors in a diagram's text or structure. Every variant with a position names it.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum DiagramError {
    /// The text does not follow the syntax.
    #[error("line {}, column {}: {message}", span.line, span.col)]
    Syntax {
        /// Where.
        span: Span,
        /// What was found and what was expected.
        message: String,
    },
    /// `a -> a`.
    #[error("line {}, column {}: self-loop on `{node}`: a variable cannot be its own cause", span.line, span.col)]
    SelfLoop {
        /// Where.
        span: Span,
        /// The node.
        node: String,
    },
    /// The same edge twice.
    #[error("line {}, column {}: duplicate edge `{edge}` (first declared at line {}, column {})", span.line, span.col, first.line, first.col)]
    DuplicateEdge {
        /// Where the repeat is.
        span: Span,
        /// The edge, as written.
        edge: String,
        /// Where it was first declared.
        first: Span,
    },
    /// A declaration word that is not a role or kind.
    #[error("line {}, column {}: unknown role `{word}` for `{node}`; expected one of: {}", span.line, span.col, ATTRIBUTE_WORDS.join(", "))]
    UnknownRole {
        /// Where.
        span: Span,
        /// The node declared.
        node: String,
        /// The word that is not allowed.
        word: String,
    },
    /// Two declarations that contradict each other.
    #[error("line {}, column {}: `{node}` is declared both {first} and {second}", span.line, span.col)]
    Conflict {
        /// Where the second declaration is.
        span: Span,
        /// The node.
        node: String,
        /// The earlier word.
        first: String,
        /// The contradicting word.
        second: String,
    },
    /// A directed cycle.
    #[error("line {}, column {}: the diagram has a directed cycle: {}; a causal diagram must be acyclic", span.line, span.col, cycle.join(" -> "))]
    Cycle {
        /// Where the edge closing the cycle is declared.
        span: Span,
        /// The cycle, first node repeated at the end.
        cycle: Vec<String>,
    },
    /// No node at all.
    #[error("the diagram declares no variable; write edges such as `treatment -> outcome`")]
    Empty,
}

impl DiagramError {
    /// The position the error refers to, if it has one.
    pub fn span(&self) -> Option<Span> {
        match self {
            DiagramError::Syntax { span, .. }
            | DiagramError::SelfLoop { span, .. }
            | DiagramError::DuplicateEdge { span, .. }
            | DiagramError::UnknownRole { span, .. }
            | DiagramError::Conflict { span, .. }
            | DiagramError::Cycle { span, .. } => Some(*span),
            DiagramError::Empty => None,
        }
    }

    /// The message without its position prefix.
    pub fn detail(&self) -> String {
        let full = self.to_string();
        match self.span() {
            Some(_) => full
                .split_once(": ")
                .map(|x| x.1.to_string())
                .unwrap_or(full),
            None => full,
        }
    }
}

/// A validated causal diagram. Invariants: acyclic; node names unique; every
/// `a <-> b` is represented by a latent node (`confounds = Some((a, b))`) with edges into
/// `a` and `b`, so every algorithm works on a plain DAG.
#[derive(Clone, Debug)]
pub struct Diagram {
    nodes: Vec<Node>,
    index: HashMap<String, usize>,
    dag: Dag,
}

/// Collects nodes, edges and declarations from a parser, then validates them.
#[derive(Default)]
pub(crate) struct Builder {
    nodes: Vec<Node>,
    index: HashMap<String, usize>,
    edges: Vec<(usize, usize, Span)>,
    edge_at: HashMap<(usize, usize), Span>,
    pairs: Vec<(usize, usize, Span)>,
    pair_at: HashMap<(usize, usize), Span>,
    role_at: HashMap<usize, (Role, Span)>,
    kind_at: HashMap<usize, (Kind, Span)>,
}

impl Builder {
    pub(crate) fn node(&mut self, name: &str, span: Span) -> usize {
        if let Some(&i) = self.index.get(name) {
            return i;
        }
        let i = self.nodes.len();
        self.nodes.push(Node {
            name: name.to_string(),
            role: Role::Observed,
            kind: Kind::Unspecified,
            confounds: None,
            span,
        });
        self.index.insert(name.to_string(), i);
        i
    }

    pub(crate) fn edge(&mut self, a: usize, b: usize, span: Span) -> Result<(), DiagramError> {
        if a == b {
            return Err(DiagramError::SelfLoop {
                span,
                node: self.nodes[a].name.clone(),
            });
        }
        if let Some(&first) = self.edge_at.get(&(a, b)) {
            return Err(DiagramError::DuplicateEdge {
                span,
                edge: format!("{} -> {}", self.nodes[a].name, self.nodes[b].name),
                first,
            });
        }
        self.edge_at.insert((a, b), span);
        self.edges.push((a, b, span));
        Ok(())
    }

    pub(crate) fn confounded(
        &mut self,
        a: usize,
        b: usize,
        span: Span,
    ) -> Result<(), DiagramError> {
        if a == b {
            return Err(DiagramError::SelfLoop {
                span,
                node: self.nodes[a].name.clone(),
            });
        }
        let key = (a.min(b), a.max(b));
        if let Some(&first) = self.pair_at.get(&key) {
            return Err(DiagramError::DuplicateEdge {
                span,
                edge: format!("{} <-> {}", self.nodes[a].name, self.nodes[b].name),
                first,
            });
        }
        self.pair_at.insert(key, span);
        self.pairs.push((a, b, span));
        Ok(())
    }

    /// Applies a declaration word (`latent`, `binary`, ...) to node `i`.
    pub(crate) fn declare(&mut self, i: usize, word: &str, span: Span) -> Result<(), DiagramError> {
        let role = match word {
            "observed" => Some(Role::Observed),
            "latent" => Some(Role::Latent),
            _ => None,
        };
        if let Some(role) = role {
            if let Some(&(prev, _)) = self.role_at.get(&i) {
                if prev != role {
                    return Err(self.conflict(i, span, role_word(prev), word));
                }
            }
            self.role_at.insert(i, (role, span));
            self.nodes[i].role = role;
            return Ok(());
        }
        let kind = match word {
            "binary" => Kind::Binary,
            "categorical" => Kind::Categorical,
            "ordinal" => Kind::Ordinal,
            "count" => Kind::Count,
            "continuous" => Kind::Continuous,
            _ => {
                return Err(DiagramError::UnknownRole {
                    span,
                    node: self.nodes[i].name.clone(),
                    word: word.to_string(),
                })
            }
        };
        if let Some(&(prev, _)) = self.kind_at.get(&i) {
            if prev != kind {
                return Err(self.conflict(i, span, prev.word(), word));
            }
        }
        self.kind_at.insert(i, (kind, span));
        self.nodes[i].kind = kind;
        Ok(())
    }

    fn conflict(&self, i: usize, span: Span, first: &str, second: &str) -> DiagramError {
        DiagramError::Conflict {
            span,
            node: self.nodes[i].name.clone(),
            first: first.to_string(),
            second: second.to_string(),
        }
    }

    pub(crate) fn finish(mut self) -> Result<Diagram, DiagramError> {
        if self.nodes.is_empty() {
            return Err(DiagramError::Empty);
        }
        for (a, b, span) in std::mem::take(&mut self.pairs) {
            let mut name = format!("{} <-> {}", self.nodes[a].name, self.nodes[b].name);
            while self.index.contains_key(&name) {
                name.push('\'');
            }
            let l = self.node(&name, span);
            self.nodes[l].role = Role::Latent;
            self.nodes[l].confounds = Some((a, b));
            self.edges.push((l, a, span));
            self.edges.push((l, b, span));
        }
        let mut dag = Dag::new(self.nodes.len());
        for &(a, b, _) in &self.edges {
            dag.add_edge(a, b);
        }
        if let Err(cycle) = dag.topological_order() {
            // Report at the edge that closes the cycle as declared last in the text.
            let span = cycle
                .windows(2)
                .filter_map(|w| self.edge_at.get(&(w[0], w[1])).copied())
                .max_by_key(|s| (s.line, s.col))
                .unwrap_or_default();
            return Err(DiagramError::Cycle {
                span,
                cycle: cycle.iter().map(|&i| self.nodes[i].name.clone()).collect(),
            });
        }
        Ok(Diagram {
            nodes: self.nodes,
            index: self.index,
            dag,
        })
    }
}

fn role_word(r: Role) -> &'static str {
    match r {
        Role::Observed => "observed",
        Role::Latent => "latent",
    }
}

impl Diagram {
    /// Parses a diagram in upshot's edge syntax, or in DOT when the text starts with
    /// `digraph` (optionally `strict digraph`).
    pub fn parse(text: &str) -> Result<Diagram, DiagramError> {
        if crate::dot::looks_like_dot(text) {
            crate::dot::parse(text)
        } else {
            crate::parse::parse(text)
        }
    }

    /// The underlying DAG (latent nodes included).
    pub fn dag(&self) -> &Dag {
        &self.dag
    }

    /// Number of nodes, latent ones included.
    pub fn len(&self) -> usize {
        self.nodes.len()
    }

    /// Whether the diagram has no node (never true for a parsed diagram).
    pub fn is_empty(&self) -> bool {
        self.nodes.is_empty()
    }

    /// All nodes in declaration order.
    pub fn nodes(&self) -> &[Node] {
        &self.nodes
    }

    /// Node `i`.
    pub fn node(&self, i: usize) -> &Node {
        &self.nodes[i]
    }

    /// Name of node `i`.
    pub fn name(&self, i: usize) -> &str {
        &self.nodes[i].name
    }

    /// The index of a named node.
    pub fn index_of(&self, name: &str) -> Option<usize> {
        self.index.get(name).copied()
    }

    /// Whether node `i` is latent.
    pub fn is_latent(&self, i: usize) -> bool {
        self.nodes[i].role == Role::Latent
    }

    /// The set of observed nodes.
    pub fn observed(&self) -> NodeSet {
        self.dag
            .set((0..self.len()).filter(|&i| !self.is_latent(i)))
    }

    /// The set of the named nodes' indices (unknown names are skipped; check with `index_of`).
    pub fn set_of<S: AsRef<str>>(&self, names: &[S]) -> NodeSet {
        self.dag
            .set(names.iter().filter_map(|n| self.index_of(n.as_ref())))
    }

    /// Names of a set's members, in index order.
    pub fn names(&self, s: &NodeSet) -> Vec<String> {
        s.iter().map(|i| self.nodes[i].name.clone()).collect()
    }

    /// A sort key of sets: their size, then their members' positions in the alphabetical order
    /// of names, sorted. Sets compare by it exactly as by `(size, sorted_names)`, without
    /// building strings (listing candidate sets on a dense diagram sorted tens of thousands).
    pub fn set_order(&self) -> impl Fn(&NodeSet) -> (usize, Vec<usize>) + '_ {
        let mut by_name: Vec<usize> = (0..self.nodes.len()).collect();
        by_name.sort_by(|&a, &b| self.nodes[a].name.cmp(&self.nodes[b].name));
        let mut rank = vec![0; self.nodes.len()];
        for (r, &i) in by_name.iter().enumerate() {
            rank[i] = r;
        }
        move |s: &NodeSet| {
            let mut v: Vec<usize> = s.iter().map(|i| rank[i]).collect();
            v.sort_unstable();
            (v.len(), v)
        }
    }

    /// Names of a set's members, sorted alphabetically.
    pub fn sorted_names(&self, s: &NodeSet) -> Vec<String> {
        let mut v = self.names(s);
        v.sort();
        v
    }

    /// The edges as written: directed edges between declared nodes, and `a <-> b` pairs.
    pub fn declared_edges(&self) -> (Vec<Edge>, Vec<Edge>) {
        let mut directed = Vec::new();
        let mut pairs = Vec::new();
        for (a, b) in self.dag.edges() {
            if self.nodes[a].confounds.is_none() {
                directed.push((a, b));
            }
        }
        for n in &self.nodes {
            if let Some(p) = n.confounds {
                pairs.push(p);
            }
        }
        (directed, pairs)
    }

    /// Renders a path in the edge syntax; a detour through the stand-in node of `a <-> b`
    /// is shown as `a <-> b`.
    pub fn format_path(&self, p: &Path) -> String {
        let mut out = String::new();
        let mut i = 0;
        out.push_str(&self.nodes[p.nodes[0]].name);
        while i < p.dirs.len() {
            let next = p.nodes[i + 1];
            if self.nodes[next].confounds.is_some() && i + 1 < p.dirs.len() {
                // a <- L -> b
                out.push_str(" <-> ");
                out.push_str(&self.nodes[p.nodes[i + 2]].name);
                i += 2;
                continue;
            }
            out.push_str(match p.dirs[i] {
                Dir::Forward => " -> ",
                Dir::Backward => " <- ",
            });
            out.push_str(&self.nodes[next].name);
            i += 1;
        }
        out
    }

    /// Renders a directed path `a -> b -> c`.
    pub fn format_chain(&self, nodes: &[usize]) -> String {
        nodes
            .iter()
            .map(|&i| self.nodes[i].name.as_str())
            .collect::<Vec<_>>()
            .join(" -> ")
    }
}

impl fmt::Display for Diagram {
    /// Writes the diagram back in the edge syntax (declarations first), which parses to an
    /// equal diagram.
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        for n in &self.nodes {
            if n.confounds.is_some() {
                continue;
            }
            let mut words = Vec::new();
            if n.role == Role::Latent {
                words.push("latent");
            }
            if n.kind != Kind::Unspecified {
                words.push(n.kind.word());
            }
            if !words.is_empty() {
                writeln!(f, "{}: {}", quote(&n.name), words.join(" "))?;
            }
        }
        let (directed, pairs) = self.declared_edges();
        for (a, b) in directed {
            writeln!(f, "{} -> {}", quote(self.name(a)), quote(self.name(b)))?;
        }
        for (a, b) in pairs {
            writeln!(f, "{} <-> {}", quote(self.name(a)), quote(self.name(b)))?;
        }
        for (i, n) in self.nodes.iter().enumerate() {
            if n.confounds.is_none()
                && self.dag.parents(i).is_empty()
                && self.dag.children(i).is_empty()
            {
                writeln!(f, "{}", quote(&n.name))?;
            }
        }
        Ok(())
    }
}

/// Quotes a name for the edge syntax when it is not a plain identifier.
pub fn quote(name: &str) -> String {
    if crate::parse::is_plain_identifier(name) {
        name.to_string()
    } else {
        format!("\"{}\"", name.replace('\\', "\\\\").replace('"', "\\\""))
    }
}
