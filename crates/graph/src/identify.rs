//! Identification: adjustment (backdoor), front-door and instrument routes, each with a
//! check of a declared set that says *why* it fails, a search for sets that work, and an
//! explanation when nothing works.
//!
//! Adjustment uses the complete adjustment criterion of Shpitser, VanderWeele & Robins (2010)
//! in the form of Perković et al. (2018): `Z` is valid for `(X, Y)` iff it contains no node of
//! `forb(X, Y)` (descendants of nodes on proper causal paths, and `X`) and d-separates `X`
//! from `Y` in the proper backdoor graph (each proper causal path's first edge removed).
//! Pearl's backdoor criterion (Causality, def. 3.3.1) is the special case reported alongside.

use crate::dag::{Dag, Path};
use crate::diagram::Diagram;
use crate::separators::{minimal_separators, nearest_minimal_separator};
use crate::set::NodeSet;

/// Nodes on proper causal paths from `x` to `y`, excluding `x` (van der Zander et al. 2019):
/// `(De_{G with edges into X removed}(X) \ X) ∩ An_{G with edges out of X removed}(Y)`.
pub fn causal_nodes(g: &Dag, x: &NodeSet, y: &NodeSet) -> NodeSet {
    let down = g.without_edges_into(x).descendants(x).difference(x);
    let up = g.without_edges_out_of(x).ancestors(y);
    down.intersection(&up)
}

/// `forb(X, Y)`: descendants of the causal nodes, and `X` itself.
pub fn forbidden(g: &Dag, x: &NodeSet, y: &NodeSet) -> NodeSet {
    g.descendants(&causal_nodes(g, x, y)).union(x)
}

/// The proper backdoor graph: `g` without the first edge `x -> w` of every proper causal path.
pub fn proper_backdoor_graph(g: &Dag, x: &NodeSet, y: &NodeSet) -> Dag {
    let cn = causal_nodes(g, x, y);
    let mut out = g.clone();
    for a in x.iter() {
        for &b in g.children(a) {
            if cn.contains(b) {
                out.remove_edge(a, b);
            }
        }
    }
    out
}

/// Why a declared set fails, as structured facts (rendered by [`Problem::describe`]).
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Problem {
    /// The node is latent and cannot be used.
    Latent(usize),
    /// The node is a treatment or an outcome.
    IsEndpoint(usize),
    /// Adjusting for a node on a causal path (a mediator) removes part of the effect.
    Mediator {
        /// The mediator.
        node: usize,
        /// A causal path through it, treatment first.
        path: Vec<usize>,
    },
    /// Adjusting for a descendant of a mediator biases the effect.
    DescendantOfMediator {
        /// The node.
        node: usize,
        /// A directed path from a mediator (first) to the node (last).
        path: Vec<usize>,
    },
    /// A non-causal path from treatment to outcome stays open given the set.
    OpenPath(Path),
    /// Front-door (i): a directed path from treatment to outcome avoids every mediator.
    Bypass(Vec<usize>),
    /// Front-door (ii): treatment and mediators are confounded.
    TreatmentMediatorPath(Path),
    /// Front-door (iii): mediators and outcome are confounded beyond what the treatment blocks.
    MediatorOutcomePath(Path),
    /// The front-door set is empty.
    NoMediator,
    /// Instrument: the instrument is itself affected by the treatment.
    AffectedByTreatment(Vec<usize>),
    /// Instrument: a conditioning variable is affected by the treatment.
    ConditionOnDescendant(Vec<usize>),
    /// Instrument relevance fails: the instrument is d-separated from the treatment.
    Irrelevant,
    /// Instrument exclusion fails: a path from instrument to outcome that avoids the
    /// treatment's effect stays open.
    ExclusionPath(Path),
}

impl Problem {
    /// A sentence naming the nodes and paths involved.
    pub fn describe(&self, d: &Diagram) -> String {
        match self {
            Problem::Latent(v) => format!("`{}` is latent (not recorded) and cannot be used", d.name(*v)),
            Problem::IsEndpoint(v) => format!("`{}` is a treatment or outcome of this question", d.name(*v)),
            Problem::Mediator { node, path } => format!(
                "`{}` is a mediator: it lies on the causal path {}; adjusting for it removes part of the effect",
                d.name(*node),
                d.format_chain(path)
            ),
            Problem::DescendantOfMediator { node, path } => format!(
                "`{}` is affected by the treatment through {}; adjusting for it biases the effect",
                d.name(*node),
                d.format_chain(path)
            ),
            Problem::OpenPath(p) => format!("the non-causal path {} stays open", d.format_path(p)),
            Problem::Bypass(p) => format!("the causal path {} avoids every mediator", d.format_chain(p)),
            Problem::TreatmentMediatorPath(p) => {
                format!("treatment and mediator are confounded along {}", d.format_path(p))
            }
            Problem::MediatorOutcomePath(p) => format!(
                "mediator and outcome are confounded along {}, which the treatment does not block",
                d.format_path(p)
            ),
            Problem::NoMediator => "no mediator given".to_string(),
            Problem::AffectedByTreatment(p) => {
                format!("the instrument is affected by the treatment: {}", d.format_chain(p))
            }
            Problem::ConditionOnDescendant(p) => format!(
                "conditioning variable `{}` is affected by the treatment: {}",
                d.name(*p.last().expect("non-empty path")),
                d.format_chain(p)
            ),
            Problem::Irrelevant => {
                "the instrument is d-separated from the treatment (given the conditioning set): it cannot move it".to_string()
            }
            Problem::ExclusionPath(p) => format!(
                "the instrument reaches the outcome other than through the treatment: {}",
                d.format_path(p)
            ),
        }
    }
}

/// The outcome of checking a declared set.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct SetCheck {
    /// Whether the set works for its route.
    pub valid: bool,
    /// Every reason it fails (empty when valid).
    pub problems: Vec<Problem>,
}

fn endpoint_problems(d: &Diagram, set: &NodeSet, ends: &NodeSet) -> Vec<Problem> {
    let mut out = Vec::new();
    for v in set.iter() {
        if d.is_latent(v) {
            out.push(Problem::Latent(v));
        }
        if ends.contains(v) {
            out.push(Problem::IsEndpoint(v));
        }
    }
    out
}

/// A causal path `x .. node .. y` through a causal node.
fn causal_path_through(g: &Dag, x: &NodeSet, y: &NodeSet, node: usize) -> Vec<usize> {
    let into = g.without_edges_into(x);
    let target = g.set([node]);
    let mut first = into
        .directed_path(x, &target, &g.empty_set())
        .unwrap_or_else(|| vec![node]);
    if !y.contains(node) {
        if let Some(rest) = g
            .without_edges_out_of(x)
            .directed_path(&target, y, &g.empty_set())
        {
            first.extend_from_slice(&rest[1..]);
        }
    }
    first
}

/// Checks `z` as an adjustment set for the effect of `x` on `y`.
pub fn check_adjustment(d: &Diagram, x: &NodeSet, y: &NodeSet, z: &NodeSet) -> SetCheck {
    let g = d.dag();
    let mut problems = endpoint_problems(d, z, &x.union(y));
    let cn = causal_nodes(g, x, y);
    let forb = g.descendants(&cn);
    for v in z
        .iter()
        .filter(|v| forb.contains(*v) && !x.contains(*v) && !y.contains(*v))
    {
        if cn.contains(v) {
            problems.push(Problem::Mediator {
                node: v,
                path: causal_path_through(g, x, y, v),
            });
        } else {
            let path = g
                .directed_path(&cn, &g.set([v]), &x.clone())
                .unwrap_or_else(|| vec![v]);
            problems.push(Problem::DescendantOfMediator { node: v, path });
        }
    }
    let zc = z.difference(&x.union(y));
    if let Some(p) = proper_backdoor_graph(g, x, y).d_connecting_path(x, y, &zc) {
        problems.push(Problem::OpenPath(p));
    }
    SetCheck {
        valid: problems.is_empty(),
        problems,
    }
}

/// Pearl's backdoor criterion: no node of `z` descends from `x`, and `z` blocks every path
/// from `x` to `y` that starts with an arrow into `x`.
pub fn satisfies_backdoor(d: &Diagram, x: &NodeSet, y: &NodeSet, z: &NodeSet) -> bool {
    let g = d.dag();
    !g.descendants(x).intersects(z) && g.without_edges_out_of(x).d_separated(x, y, z)
}

/// The moral graph and candidate set on which adjustment sets are vertex separators.
fn adjustment_separator_problem(
    d: &Diagram,
    x: &NodeSet,
    y: &NodeSet,
    allowed: &NodeSet,
) -> (Vec<Vec<usize>>, NodeSet) {
    let g = d.dag();
    let pbd = proper_backdoor_graph(g, x, y);
    let an = pbd.ancestors(&x.union(y));
    let adj = pbd.moral_graph(&an);
    let allowed = allowed
        .intersection(&an)
        .difference(&forbidden(g, x, y))
        .difference(y);
    (adj, allowed)
}

/// All minimal adjustment sets drawn from `allowed` (van der Zander, Liśkiewicz & Textor
/// 2019: minimal separators in the moral graph of the proper backdoor graph's ancestral set),
/// at most `limit`; the flag is true when the list is complete. Sorted by size, then names.
pub fn minimal_adjustment_sets(
    d: &Diagram,
    x: &NodeSet,
    y: &NodeSet,
    allowed: &NodeSet,
    limit: usize,
) -> (Vec<NodeSet>, bool) {
    let (adj, allowed) = adjustment_separator_problem(d, x, y, allowed);
    let (mut sets, complete) = minimal_separators(&adj, x, y, &allowed, limit);
    sets.sort_by_cached_key(d.set_order());
    (sets, complete)
}

/// Whether any adjustment set drawn from `allowed` exists, and if not, a non-causal path that
/// every such set leaves open.
pub fn adjustment_blocked_by(
    d: &Diagram,
    x: &NodeSet,
    y: &NodeSet,
    allowed: &NodeSet,
) -> Result<(), Option<Path>> {
    let (adj, allowed2) = adjustment_separator_problem(d, x, y, allowed);
    if nearest_minimal_separator(&adj, x, y, &allowed2).is_some() {
        return Ok(());
    }
    // The largest candidate set is valid iff any is (van der Zander et al. 2019), so the path
    // it leaves open is one no allowed set can close.
    let pbd = proper_backdoor_graph(d.dag(), x, y);
    Err(pbd.d_connecting_path(x, y, &allowed2))
}

/// The optimal adjustment set `O = pa(cn(X, Y)) \ forb(X, Y)` of Henckel, Perković &
/// Maathuis (2022): among valid adjustment sets it gives the smallest asymptotic variance
/// (for linear models, and more generally per Rotnitzky & Smucler 2020).
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Optimal {
    /// `O` is observed and valid.
    Found(NodeSet),
    /// `O` includes latent nodes, so it is not available from the data.
    NeedsLatent {
        /// The whole optimal set.
        set: NodeSet,
        /// Its latent members.
        latent: NodeSet,
    },
    /// No causal path, or no valid adjustment set at all.
    None,
}

/// Computes the optimal adjustment set; see [`Optimal`].
pub fn optimal_adjustment_set(d: &Diagram, x: &NodeSet, y: &NodeSet) -> Optimal {
    let g = d.dag();
    let cn = causal_nodes(g, x, y);
    if cn.is_empty() {
        return Optimal::None;
    }
    let mut o = g.empty_set();
    for v in cn.iter() {
        for &p in g.parents(v) {
            o.insert(p);
        }
    }
    let o = o.difference(&forbidden(g, x, y));
    let latent = o.difference(&d.observed());
    if !latent.is_empty() {
        // O is optimal among all sets of the full DAG; only report it when a valid observed
        // set also exists is left to the caller.
        return Optimal::NeedsLatent { set: o, latent };
    }
    if check_adjustment(d, x, y, &o).valid {
        Optimal::Found(o)
    } else {
        Optimal::None
    }
}

/// Checks Pearl's front-door criterion (Causality, def. 3.3.3) for mediators `m` of the effect
/// of `x` on `y`: (i) `m` intercepts every directed path from `x` to `y`; (ii) no unblocked
/// backdoor path from `x` to `m`; (iii) every backdoor path from `m` to `y` is blocked by `x`.
pub fn check_front_door(d: &Diagram, x: &NodeSet, y: &NodeSet, m: &NodeSet) -> SetCheck {
    let g = d.dag();
    let mut problems = endpoint_problems(d, m, &x.union(y));
    if m.is_empty() {
        problems.push(Problem::NoMediator);
    }
    let mc = m.difference(&x.union(y));
    if let Some(p) = g.directed_path(x, y, &mc) {
        problems.push(Problem::Bypass(p));
    }
    if !mc.is_empty() {
        if let Some(p) = g
            .without_edges_out_of(x)
            .d_connecting_path(x, &mc, &g.empty_set())
        {
            problems.push(Problem::TreatmentMediatorPath(p));
        }
        if let Some(p) = g.without_edges_out_of(&mc).d_connecting_path(&mc, y, x) {
            problems.push(Problem::MediatorOutcomePath(p));
        }
    }
    SetCheck {
        valid: problems.is_empty(),
        problems,
    }
}

/// Searches observed nodes on causal paths for front-door sets, smallest first, keeping only
/// inclusion-minimal ones. Tries at most `budget` subsets (scaled down by `100 / n` for a diagram
/// of `n > 100` variables); the flag says whether the search was exhaustive.
pub fn find_front_door(
    d: &Diagram,
    x: &NodeSet,
    y: &NodeSet,
    budget: usize,
) -> (Vec<NodeSet>, bool) {
    let g = d.dag();
    // Each check walks the whole diagram: beyond 100 variables the budget of subsets shrinks in
    // proportion, so the work stays bounded (a 30,000-node chain ran for over 10 minutes).
    let budget = if g.len() > 100 {
        (budget * 100 / g.len()).max(1)
    } else {
        budget
    };
    let ux = g.without_edges_out_of(x);
    // Condition (ii) holds for a set iff it holds for each member, so filter members first.
    let cand: Vec<usize> = causal_nodes(g, x, y)
        .intersection(&d.observed())
        .difference(y)
        .iter()
        .filter(|&v| ux.d_separated(x, &g.set([v]), &g.empty_set()))
        .collect();
    let mut found: Vec<NodeSet> = Vec::new();
    let mut tried = 0usize;
    let k = cand.len();
    for size in 1..=k {
        let mut idx: Vec<usize> = (0..size).collect();
        loop {
            tried += 1;
            if tried > budget {
                return (found, false);
            }
            let s = g.set(idx.iter().map(|&i| cand[i]));
            if !found.iter().any(|f| f.is_subset(&s)) && check_front_door(d, x, y, &s).valid {
                found.push(s);
            }
            // next combination
            let mut i = size;
            while i > 0 && idx[i - 1] == k - size + i - 1 {
                i -= 1;
            }
            if i == 0 {
                break;
            }
            idx[i - 1] += 1;
            for j in i..size {
                idx[j] = idx[j - 1] + 1;
            }
        }
    }
    (found, true)
}

/// Checks `z` as an instrument for the effect of `x` on `y`, conditionally on `w` (empty for an
/// unconditional instrument): `z` and `w` are not affected by `x`; `z` and `x` are d-connected
/// given `w` (relevance); `z` and `y` are d-separated given `w` once the edges out of `x` are
/// removed (exclusion). This is the graphical instrument of Pearl (2009, sec. 7.4.5) and
/// Brito & Pearl (2002), applied to the total effect.
pub fn check_instrument(
    d: &Diagram,
    x: &NodeSet,
    y: &NodeSet,
    z: &NodeSet,
    w: &NodeSet,
) -> SetCheck {
    let g = d.dag();
    let ends = x.union(y);
    let mut problems = endpoint_problems(d, &z.union(w), &ends);
    let dex = g.descendants(x);
    for v in z.iter().filter(|v| dex.contains(*v) && !ends.contains(*v)) {
        if let Some(p) = g.directed_path(x, &g.set([v]), &g.empty_set()) {
            problems.push(Problem::AffectedByTreatment(p));
        }
    }
    for v in w.iter().filter(|v| dex.contains(*v) && !ends.contains(*v)) {
        if let Some(p) = g.directed_path(x, &g.set([v]), &g.empty_set()) {
            problems.push(Problem::ConditionOnDescendant(p));
        }
    }
    let zc = z.difference(&ends);
    let wc = w.difference(&ends).difference(&zc);
    if !zc.is_empty() {
        if g.d_separated(&zc, x, &wc) {
            problems.push(Problem::Irrelevant);
        }
        if let Some(p) = g.without_edges_out_of(x).d_connecting_path(&zc, y, &wc) {
            problems.push(Problem::ExclusionPath(p));
        }
    }
    SetCheck {
        valid: problems.is_empty(),
        problems,
    }
}

/// Observed instruments for `x -> y`, each with the smallest conditioning set found (empty
/// when unconditional). Conditioning sets are drawn from observed nodes not affected by the
/// treatment. Candidates, in order: the empty set; minimal separators of instrument and outcome
/// once the treatment's out-edges are removed (van der Zander, Textor & Liśkiewicz 2015); each
/// of those with one more variable (relevance can need a conditioned collider); then every
/// subset by increasing size until `INSTRUMENT_BUDGET` checks per candidate instrument, which
/// makes the search exhaustive for up to 12 candidate conditioning variables.
pub fn find_instruments(d: &Diagram, x: &NodeSet, y: &NodeSet) -> Vec<(usize, NodeSet)> {
    let g = d.dag();
    let ux = g.without_edges_out_of(x);
    let dex = g.descendants(x);
    let obs = d.observed();
    let mut out = Vec::new();
    // Candidate sets left to test in the whole search: a bound on the time a diagram of
    // thousands of variables takes; diagrams a person draws never reach it.
    let checks = std::cell::Cell::new(INSTRUMENT_SEARCH_CHECKS);
    let order = d.set_order();
    for z in obs.difference(&dex).difference(y).iter() {
        if checks.get() == 0 {
            break;
        }
        let zs = g.set([z]);
        // Candidate sets below are observed and free of the treatment's descendants, so only
        // relevance and exclusion remain to be tested (no graph copies per test).
        let ok = |w: &NodeSet| {
            if checks.get() == 0 {
                return false;
            }
            checks.set(checks.get() - 1);
            !g.d_separated(&zs, x, w) && ux.d_separated(&zs, y, w)
        };
        let empty = g.empty_set();
        if ok(&empty) {
            out.push((z, empty));
            continue;
        }
        let allowed = obs
            .difference(&dex)
            .difference(&zs)
            .difference(x)
            .difference(y);
        let an = ux.ancestors(&zs.union(y));
        let adj = ux.moral_graph(&an);
        // Every separator listed counts against the search's budget too: on a dense diagram
        // listing them costs more than testing them.
        let limit = checks.get().min(256);
        let (mut seps, _) = minimal_separators(&adj, &zs, y, &allowed.intersection(&an), limit);
        checks.set(checks.get() - seps.len());
        if seps.is_empty() {
            // No allowed set separates z from y (the part of a separator inside An(z, y) would
            // itself be one), so exclusion fails for every conditioning set.
            continue;
        }
        seps.sort_by_cached_key(&order);
        let mut hit = seps.iter().find(|w| ok(w)).cloned();
        if hit.is_none() {
            let mut grown: Vec<NodeSet> = Vec::new();
            for s in &seps {
                for c in allowed.difference(s).iter() {
                    let mut w = s.clone();
                    w.insert(c);
                    grown.push(w);
                }
            }
            grown.sort_by_cached_key(&order);
            // The same set grows from several separators; test it once.
            grown.dedup();
            hit = grown.into_iter().take(INSTRUMENT_BUDGET).find(|w| ok(w));
        }
        if hit.is_none() {
            hit = subsets_by_size(&allowed.to_vec(), g.len(), INSTRUMENT_BUDGET).find(|w| ok(w));
        }
        if let Some(w) = hit {
            debug_assert!(check_instrument(d, x, y, &zs, &w).valid);
            out.push((z, w));
        }
    }
    out
}

/// Candidate conditioning sets [`find_instruments`] tests on a whole diagram at most (each
/// costs two d-separation tests); past it, the instruments found so far are reported.
pub const INSTRUMENT_SEARCH_CHECKS: usize = 20_000;

/// Checks per candidate instrument in the exhaustive stage of [`find_instruments`].
pub const INSTRUMENT_BUDGET: usize = 4096;

/// Subsets of `items` in order of increasing size, at most `budget` of them.
fn subsets_by_size(
    items: &[usize],
    cap: usize,
    budget: usize,
) -> impl Iterator<Item = NodeSet> + '_ {
    let k = items.len();
    let mut size = 0usize;
    let mut idx: Vec<usize> = Vec::new();
    let mut fresh = true;
    let mut emitted = 0usize;
    std::iter::from_fn(move || {
        if emitted >= budget || size > k {
            return None;
        }
        if fresh {
            fresh = false;
        } else {
            // advance to the next combination of this size, or the first of the next size
            let mut i = size;
            while i > 0 && idx[i - 1] == k - size + i - 1 {
                i -= 1;
            }
            if i == 0 {
                size += 1;
                if size > k {
                    return None;
                }
                idx = (0..size).collect();
            } else {
                idx[i - 1] += 1;
                for j in i..size {
                    idx[j] = idx[j - 1] + 1;
                }
            }
        }
        emitted += 1;
        Some(NodeSet::from_iter(cap, idx.iter().map(|&i| items[i])))
    })
}

/// A conditional independence implied by the diagram among observed variables.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Independence {
    /// One variable.
    pub a: usize,
    /// The other variable.
    pub b: usize,
    /// The conditioning set.
    pub given: NodeSet,
}

/// For every pair of non-adjacent observed variables that some observed set d-separates, one
/// such statement with a minimal conditioning set (the one nearest the later variable in
/// topological order): small conditioning sets make the most powerful tests on data. Every
/// statement is implied by the diagram; together they need not imply all of its independences
/// (that is what [`local_markov_basis`] gives).
pub fn implied_independences(d: &Diagram) -> Vec<Independence> {
    implied_independences_up_to(d, usize::MAX).0
}

/// As [`implied_independences`], examining at most `max_pairs` non-adjacent pairs (in
/// topological order): each pair costs a moralisation and a separator search, so a diagram of
/// thousands of variables has millions of them. Returns the independences found and how many
/// non-adjacent pairs were left unexamined.
pub fn implied_independences_up_to(d: &Diagram, max_pairs: usize) -> (Vec<Independence>, usize) {
    let g = d.dag();
    let order = g.topological_order().expect("diagram is acyclic");
    let mut pos = vec![0; g.len()];
    for (i, &v) in order.iter().enumerate() {
        pos[v] = i;
    }
    let obs: Vec<usize> = order.iter().copied().filter(|&v| !d.is_latent(v)).collect();
    let observed = d.observed();
    let mut out = Vec::new();
    let (mut examined, mut unexamined) = (0usize, 0usize);
    for (i, &a) in obs.iter().enumerate() {
        for &b in &obs[i + 1..] {
            if g.has_edge(a, b) || g.has_edge(b, a) {
                continue;
            }
            if examined >= max_pairs {
                unexamined += 1;
                continue;
            }
            examined += 1;
            let (sa, sb) = (g.set([a]), g.set([b]));
            let an = g.ancestors(&sa.union(&sb));
            let adj = g.moral_graph(&an);
            let allowed = observed.intersection(&an).difference(&sa).difference(&sb);
            if let Some(z) = nearest_minimal_separator(&adj, &sb, &sa, &allowed) {
                debug_assert!(g.d_separated(&sa, &sb, &z));
                let (a, b) = if pos[a] < pos[b] { (a, b) } else { (b, a) };
                out.push(Independence { a, b, given: z });
            }
        }
    }
    (out, unexamined)
}

/// One statement of the local Markov property: `node` is independent of `independent_of` (its
/// non-descendants other than its parents) given `given` (its parents).
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct MarkovStatement {
    /// The variable.
    pub node: usize,
    /// Its non-descendants that are not parents.
    pub independent_of: NodeSet,
    /// Its parents.
    pub given: NodeSet,
}

/// The local Markov basis of a diagram without latent variables: each variable is independent of
/// its non-descendants given its parents. Every d-separation of the diagram follows from these
/// statements by the graphoid axioms (Verma & Pearl 1988; Lauritzen 1996, sec. 3.2.2), so they are
/// a complete list of its testable implications. Statements with nothing to say are omitted.
/// `None` when the diagram has latent variables: its observed margin is then not a DAG and has no
/// basis of this form; use [`implied_independences`].
pub fn local_markov_basis(d: &Diagram) -> Option<Vec<MarkovStatement>> {
    if d.observed().len() != d.len() {
        return None;
    }
    let g = d.dag();
    let order = g.topological_order().expect("diagram is acyclic");
    let mut out = Vec::new();
    for v in order {
        let vs = g.set([v]);
        let given = g.set(g.parents(v).iter().copied());
        let independent_of = g
            .set(0..g.len())
            .difference(&g.descendants(&vs))
            .difference(&given);
        if !independent_of.is_empty() {
            debug_assert!(g.d_separated(&vs, &independent_of, &given));
            out.push(MarkovStatement {
                node: v,
                independent_of,
                given,
            });
        }
    }
    Some(out)
}
