//! Minimal vertex separators in an undirected graph, restricted to allowed vertices.
//!
//! Used on moral graphs of ancestral sets, where vertex separation equals d-separation
//! (Lauritzen et al. 1990). The listing follows the branching scheme of van der Zander,
//! Liśkiewicz & Textor (2019): grow the region on the source side; each vertex bordering the
//! region either joins it or joins the separator. Before a branch is entered we test in
//! linear time that it still contains a minimal separator, so the delay between two outputs
//! is polynomial. The test: with region `A` closed (every non-allowed neighbour absorbed),
//! the target-side component `D` of `G - A - N(A)` is the largest the target side can be, and
//! `N(D)` is a minimal separator; a branch whose forced separator vertices `I` are not all in
//! `N(D)` holds none, since every vertex of a minimal separator borders the target side.

use crate::set::NodeSet;

/// Closes `region` under neighbours that are not allowed in a separator. Returns false if it
/// reaches a vertex of `target` (then no separator exists).
fn close(adj: &[Vec<usize>], region: &mut NodeSet, target: &NodeSet, allowed: &NodeSet) -> bool {
    let start = region.to_vec();
    close_from(adj, region, start, target, allowed).is_some()
}

/// [`close`] for a region that was closed before the vertices of `fresh` joined it: only their
/// neighbourhoods need a look. Returns the vertices that joined (`fresh` and those absorbed),
/// or `None` when a vertex of `target` was reached.
fn close_from(
    adj: &[Vec<usize>],
    region: &mut NodeSet,
    fresh: Vec<usize>,
    target: &NodeSet,
    allowed: &NodeSet,
) -> Option<Vec<usize>> {
    let mut joined = fresh.clone();
    let mut stack = fresh;
    while let Some(v) = stack.pop() {
        for &w in &adj[v] {
            if region.contains(w) {
                continue;
            }
            if target.contains(w) {
                return None;
            }
            if !allowed.contains(w) {
                region.insert(w);
                stack.push(w);
                joined.push(w);
            }
        }
    }
    Some(joined)
}

fn border(adj: &[Vec<usize>], region: &NodeSet) -> NodeSet {
    let mut out = NodeSet::new(region.capacity());
    for v in region.iter() {
        for &w in &adj[v] {
            if !region.contains(w) {
                out.insert(w);
            }
        }
    }
    out
}

fn component(adj: &[Vec<usize>], start: &NodeSet, blocked: &NodeSet) -> NodeSet {
    let mut seen = start.clone();
    let mut stack = start.to_vec();
    while let Some(v) = stack.pop() {
        for &w in &adj[v] {
            if !blocked.contains(w) && seen.insert(w) {
                stack.push(w);
            }
        }
    }
    seen
}

/// The minimal separator of `source` and `target` (disjoint, not allowed themselves) made only of
/// `allowed` vertices that lies closest to `near`, which is `source` or `target`. `None` when
/// no separator made of allowed vertices exists.
pub fn nearest_minimal_separator(
    adj: &[Vec<usize>],
    near: &NodeSet,
    far: &NodeSet,
    allowed: &NodeSet,
) -> Option<NodeSet> {
    let mut region = near.clone();
    if !close(adj, &mut region, far, allowed) {
        return None;
    }
    let n = border(adj, &region);
    let d = component(adj, far, &region.union(&n));
    Some(border(adj, &d))
}

/// Lists minimal separators of `source` and `target` made of `allowed` vertices, at most
/// `limit` of them. Returns them with a flag that is true when the list is complete.
pub fn minimal_separators(
    adj: &[Vec<usize>],
    source: &NodeSet,
    target: &NodeSet,
    allowed: &NodeSet,
    limit: usize,
) -> (Vec<NodeSet>, bool) {
    let mut out = Vec::new();
    let mut complete = true;
    // Depth-first over (region, forced) pairs with an explicit stack: a recursion here went as
    // deep as the diagram is large and overflowed the stack on 30,000 nodes. The `grown` branch
    // is explored before the `forced` one, as the recursion did, so the order is unchanged.
    // Each entry carries the vertices that joined its region since the region was last closed
    // (all of it at the start) and the border it had then, so closing and the new border look
    // only at the newcomers' neighbourhoods.
    let cap = source.capacity();
    let mut stack = vec![(
        source.clone(),
        NodeSet::new(cap),
        source.to_vec(),
        NodeSet::new(cap),
    )];
    while let Some((mut region, forced, fresh, mut n)) = stack.pop() {
        if out.len() >= limit {
            complete = false;
            break;
        }
        let Some(joined) = close_from(adj, &mut region, fresh, target, allowed) else {
            continue;
        };
        for &v in &joined {
            n.remove(v);
        }
        for &v in &joined {
            for &w in &adj[v] {
                if !region.contains(w) {
                    n.insert(w);
                }
            }
        }
        debug_assert_eq!(n, border(adj, &region));
        let d = component(adj, target, &region.union(&n));
        if !forced.is_subset(&border(adj, &d)) {
            continue;
        }
        match n.difference(&forced).first() {
            None => out.push(n),
            Some(v) => {
                let mut grown = region.clone();
                grown.insert(v);
                let mut more = forced.clone();
                more.insert(v);
                stack.push((region, more, Vec::new(), n.clone()));
                stack.push((grown, forced, vec![v], n));
            }
        }
    }
    (out, complete)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Brute force: all subsets of `allowed` that separate, keeping the inclusion-minimal ones.
    fn brute(adj: &[Vec<usize>], s: &NodeSet, t: &NodeSet, allowed: &NodeSet) -> Vec<NodeSet> {
        let cand = allowed.to_vec();
        let n = s.capacity();
        let mut seps = Vec::new();
        for mask in 0u32..(1 << cand.len()) {
            let z = NodeSet::from_iter(
                n,
                cand.iter()
                    .enumerate()
                    .filter(|(i, _)| mask >> i & 1 == 1)
                    .map(|x| *x.1),
            );
            let reach = component(adj, s, &z);
            if !reach.intersects(t) {
                seps.push(z);
            }
        }
        let mut min: Vec<NodeSet> = seps
            .iter()
            .filter(|z| !seps.iter().any(|w| w != *z && w.is_subset(z)))
            .cloned()
            .collect();
        min.sort_by_key(|z| z.to_vec());
        min
    }

    #[test]
    fn matches_brute_force_on_random_graphs() {
        let mut state = 0x2545F4914F6CDD1Du64;
        let mut rnd = || {
            state ^= state << 13;
            state ^= state >> 7;
            state ^= state << 17;
            state
        };
        for _ in 0..400 {
            let n = 3 + (rnd() % 8) as usize;
            let mut adj = vec![Vec::new(); n];
            for a in 0..n {
                for b in a + 1..n {
                    if rnd() % 100 < 35 {
                        adj[a].push(b);
                        adj[b].push(a);
                    }
                }
            }
            let s = NodeSet::from_iter(n, [0]);
            let t = NodeSet::from_iter(n, [n - 1]);
            let allowed = NodeSet::from_iter(n, (1..n - 1).filter(|_| rnd() % 100 < 80));
            let (mut got, complete) = minimal_separators(&adj, &s, &t, &allowed, 10_000);
            assert!(complete);
            got.sort_by_key(|z| z.to_vec());
            assert_eq!(
                got,
                brute(&adj, &s, &t, &allowed),
                "graph {adj:?} allowed {allowed:?}"
            );
            let near = nearest_minimal_separator(&adj, &t, &s, &allowed);
            assert_eq!(near.is_some(), !got.is_empty());
            if let Some(z) = near {
                assert!(got.contains(&z));
            }
        }
    }
}
