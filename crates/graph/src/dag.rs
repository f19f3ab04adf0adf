//! Directed acyclic graphs over node indices: reachability, surgery and d-separation.
//!
//! d-separation uses the "reachable" formulation of the Bayes-ball algorithm
//! (Shachter 1998; Koller & Friedman 2009, algorithm 3.1): a breadth-first search over
//! (node, direction) states, linear in the number of nodes plus edges. It also returns a
//! witness: a d-connecting path, so that callers can explain *why* two sets are dependent.

use crate::set::NodeSet;
use std::collections::VecDeque;

/// Adjacency of a directed graph. Invariant: `parents[v]` and `children[v]` describe the same
/// edge set, each list sorted and free of duplicates.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Dag {
    parents: Vec<Vec<usize>>,
    children: Vec<Vec<usize>>,
}

/// How a step of a path is traversed.
#[derive(Clone, Copy, Debug, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Dir {
    /// `a -> b`: the step follows the edge.
    Forward,
    /// `a <- b`: the step goes against the edge.
    Backward,
}

/// A path `nodes[0] (dirs[0]) nodes[1] (dirs[1]) ...`; `dirs.len() + 1 == nodes.len()`.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Path {
    /// The nodes visited, in order.
    pub nodes: Vec<usize>,
    /// The orientation of each step between consecutive nodes.
    pub dirs: Vec<Dir>,
}

impl Dag {
    /// A graph with `n` nodes and no edges.
    pub fn new(n: usize) -> Self {
        Dag {
            parents: vec![Vec::new(); n],
            children: vec![Vec::new(); n],
        }
    }

    /// Number of nodes.
    pub fn len(&self) -> usize {
        self.parents.len()
    }

    /// Whether the graph has no node.
    pub fn is_empty(&self) -> bool {
        self.parents.is_empty()
    }

    /// Adds `a -> b`; returns false if it was already present.
    pub fn add_edge(&mut self, a: usize, b: usize) -> bool {
        match self.children[a].binary_search(&b) {
            Ok(_) => false,
            Err(pos) => {
                self.children[a].insert(pos, b);
                let p = self.parents[b].binary_search(&a).unwrap_err();
                self.parents[b].insert(p, a);
                true
            }
        }
    }

    /// Removes `a -> b` if present.
    pub fn remove_edge(&mut self, a: usize, b: usize) {
        if let Ok(pos) = self.children[a].binary_search(&b) {
            self.children[a].remove(pos);
            let p = self.parents[b]
                .binary_search(&a)
                .expect("adjacency invariant");
            self.parents[b].remove(p);
        }
    }

    /// Whether `a -> b` is an edge.
    pub fn has_edge(&self, a: usize, b: usize) -> bool {
        self.children[a].binary_search(&b).is_ok()
    }

    /// Parents of `v`, sorted.
    pub fn parents(&self, v: usize) -> &[usize] {
        &self.parents[v]
    }

    /// Children of `v`, sorted.
    pub fn children(&self, v: usize) -> &[usize] {
        &self.children[v]
    }

    /// All edges `(a, b)` in lexicographic order.
    pub fn edges(&self) -> Vec<(usize, usize)> {
        let mut e = Vec::new();
        for (a, cs) in self.children.iter().enumerate() {
            for &b in cs {
                e.push((a, b));
            }
        }
        e
    }

    /// Number of edges.
    pub fn edge_count(&self) -> usize {
        self.children.iter().map(Vec::len).sum()
    }

    /// An empty set sized for this graph.
    pub fn empty_set(&self) -> NodeSet {
        NodeSet::new(self.len())
    }

    /// The set of the given nodes.
    pub fn set<I: IntoIterator<Item = usize>>(&self, items: I) -> NodeSet {
        NodeSet::from_iter(self.len(), items)
    }

    fn closure(&self, start: &NodeSet, up: bool) -> NodeSet {
        let mut seen = start.clone();
        let mut stack: Vec<usize> = start.to_vec();
        while let Some(v) = stack.pop() {
            let next = if up {
                &self.parents[v]
            } else {
                &self.children[v]
            };
            for &w in next {
                if seen.insert(w) {
                    stack.push(w);
                }
            }
        }
        seen
    }

    /// Ancestors of the set, including the set itself.
    pub fn ancestors(&self, of: &NodeSet) -> NodeSet {
        self.closure(of, true)
    }

    /// Descendants of the set, including the set itself.
    pub fn descendants(&self, of: &NodeSet) -> NodeSet {
        self.closure(of, false)
    }

    /// The graph with every edge into a node of `nodes` removed: the do-operator's surgery,
    /// written `G_{\overline X}` in the literature.
    pub fn without_edges_into(&self, nodes: &NodeSet) -> Dag {
        let mut g = self.clone();
        for v in nodes.iter() {
            for p in self.parents[v].clone() {
                g.remove_edge(p, v);
            }
        }
        g
    }

    /// The graph with every edge out of a node of `nodes` removed (`G_{\underline X}`).
    pub fn without_edges_out_of(&self, nodes: &NodeSet) -> Dag {
        let mut g = self.clone();
        for v in nodes.iter() {
            for c in self.children[v].clone() {
                g.remove_edge(v, c);
            }
        }
        g
    }

    /// The subgraph induced by `keep`, with nodes outside it left isolated (indices unchanged).
    pub fn induced(&self, keep: &NodeSet) -> Dag {
        let mut g = Dag::new(self.len());
        for (a, b) in self.edges() {
            if keep.contains(a) && keep.contains(b) {
                g.add_edge(a, b);
            }
        }
        g
    }

    /// A topological order, or a directed cycle (first node repeated at the end) if there is one.
    pub fn topological_order(&self) -> Result<Vec<usize>, Vec<usize>> {
        // Iterative depth-first search with colours, so that a cycle can be reported.
        let n = self.len();
        let mut colour = vec![0u8; n]; // 0 new, 1 on stack, 2 done
        let mut order = Vec::with_capacity(n);
        let mut parent = vec![usize::MAX; n];
        for root in 0..n {
            if colour[root] != 0 {
                continue;
            }
            let mut stack: Vec<(usize, usize)> = vec![(root, 0)];
            colour[root] = 1;
            while let Some(&mut (v, ref mut i)) = stack.last_mut() {
                if *i < self.children[v].len() {
                    let w = self.children[v][*i];
                    *i += 1;
                    match colour[w] {
                        0 => {
                            colour[w] = 1;
                            parent[w] = v;
                            stack.push((w, 0));
                        }
                        1 => {
                            let mut cycle = vec![w];
                            let mut u = v;
                            while u != w {
                                cycle.push(u);
                                u = parent[u];
                            }
                            cycle.push(w);
                            cycle.reverse();
                            return Err(cycle);
                        }
                        _ => {}
                    }
                } else {
                    colour[v] = 2;
                    order.push(v);
                    stack.pop();
                }
            }
        }
        order.reverse();
        Ok(order)
    }

    /// Whether every node of `x` is d-separated from every node of `y` given `z`.
    /// The three sets must be disjoint (callers check; a node in both `x` and `y` is
    /// trivially dependent on itself and is reported as not separated).
    pub fn d_separated(&self, x: &NodeSet, y: &NodeSet, z: &NodeSet) -> bool {
        self.d_connecting_path(x, y, z).is_none()
    }

    /// The nodes d-connected to `x` given `z` (excluding `z`, including `x` itself).
    pub fn d_connected_nodes(&self, x: &NodeSet, z: &NodeSet) -> NodeSet {
        let mut out = self.empty_set();
        self.bayes_ball(x, z, |v| {
            out.insert(v);
            false
        });
        out
    }

    /// A path from a node of `x` to a node of `y` that is d-connecting given `z`, if one exists.
    /// The path is a walk in the sense of Bayes-ball: every collider on it is an ancestor of `z`,
    /// and no non-collider is in `z`.
    pub fn d_connecting_path(&self, x: &NodeSet, y: &NodeSet, z: &NodeSet) -> Option<Path> {
        self.bayes_ball(x, z, |v| y.contains(v))
    }

    /// Breadth-first search over states (node, arrived-from-child?) from `x` given `z`. Calls
    /// `hit` for every reachable node not in `z`; stops with the path to the first node for
    /// which `hit` returns true.
    fn bayes_ball(
        &self,
        x: &NodeSet,
        z: &NodeSet,
        mut hit: impl FnMut(usize) -> bool,
    ) -> Option<Path> {
        let n = self.len();
        let anz = self.ancestors(z);
        // state index: 2*v + 0 = arrived going up (from a child), 2*v + 1 = arrived going down
        let mut pred = vec![usize::MAX; 2 * n];
        let mut seen = vec![false; 2 * n];
        let mut reported = vec![false; n];
        let mut queue = VecDeque::new();
        for v in x.iter() {
            seen[2 * v] = true;
            pred[2 * v] = usize::MAX;
            queue.push_back(2 * v);
        }
        let path_to = |state: usize, pred: &Vec<usize>| -> Path {
            let mut states = vec![state];
            let mut s = state;
            while pred[s] != usize::MAX {
                s = pred[s];
                states.push(s);
            }
            states.reverse();
            let nodes: Vec<usize> = states.iter().map(|s| s / 2).collect();
            let dirs = states[1..]
                .iter()
                .map(|s| {
                    if s % 2 == 1 {
                        Dir::Forward
                    } else {
                        Dir::Backward
                    }
                })
                .collect();
            Path { nodes, dirs }
        };
        while let Some(s) = queue.pop_front() {
            let v = s / 2;
            let down = s % 2 == 1;
            if !z.contains(v) && !reported[v] {
                reported[v] = true;
                if hit(v) {
                    return Some(path_to(s, &pred));
                }
            }
            let mut push = |t: usize, queue: &mut VecDeque<usize>| {
                if !seen[t] {
                    seen[t] = true;
                    pred[t] = s;
                    queue.push_back(t);
                }
            };
            if !down {
                if !z.contains(v) {
                    for &p in &self.parents[v] {
                        push(2 * p, &mut queue);
                    }
                    for &c in &self.children[v] {
                        push(2 * c + 1, &mut queue);
                    }
                }
            } else {
                if !z.contains(v) {
                    for &c in &self.children[v] {
                        push(2 * c + 1, &mut queue);
                    }
                }
                if anz.contains(v) {
                    for &p in &self.parents[v] {
                        push(2 * p, &mut queue);
                    }
                }
            }
        }
        None
    }

    /// Whether there is a directed path from a node of `from` to a node of `to` avoiding the
    /// nodes of `avoid` (the end points may not be in `avoid`).
    pub fn directed_path(
        &self,
        from: &NodeSet,
        to: &NodeSet,
        avoid: &NodeSet,
    ) -> Option<Vec<usize>> {
        let mut pred = vec![usize::MAX; self.len()];
        let mut seen = avoid.clone();
        let mut queue: VecDeque<usize> = VecDeque::new();
        for v in from.iter() {
            if seen.insert(v) {
                queue.push_back(v);
            }
        }
        while let Some(v) = queue.pop_front() {
            for &c in &self.children[v] {
                if to.contains(c) && !avoid.contains(c) {
                    let mut path = vec![c, v];
                    let mut u = v;
                    while pred[u] != usize::MAX {
                        u = pred[u];
                        path.push(u);
                    }
                    path.reverse();
                    return Some(path);
                }
                if seen.insert(c) {
                    pred[c] = v;
                    queue.push_back(c);
                }
            }
        }
        None
    }

    /// The moral graph of the subgraph induced by `keep`: parents of a common child married,
    /// directions dropped. Returned as sorted adjacency lists (nodes outside `keep` isolated).
    pub fn moral_graph(&self, keep: &NodeSet) -> Vec<Vec<usize>> {
        // Lists, not one bit set per vertex: that took n² bits per call, and the implied
        // independences of a 30,000-variable diagram build thousands of moral graphs.
        let mut adj = vec![Vec::new(); self.len()];
        for v in keep.iter() {
            let ps: Vec<usize> = self.parents[v]
                .iter()
                .copied()
                .filter(|p| keep.contains(*p))
                .collect();
            for (i, &p) in ps.iter().enumerate() {
                adj[p].push(v);
                adj[v].push(p);
                for &q in &ps[i + 1..] {
                    adj[p].push(q);
                    adj[q].push(p);
                }
            }
        }
        for a in &mut adj {
            a.sort_unstable();
            a.dedup();
        }
        adj
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn chain() -> Dag {
        // 0 -> 1 -> 2, 0 -> 3 <- 2 (3 is a collider)
        let mut g = Dag::new(4);
        g.add_edge(0, 1);
        g.add_edge(1, 2);
        g.add_edge(0, 3);
        g.add_edge(2, 3);
        g
    }

    #[test]
    fn chain_and_collider() {
        let g = chain();
        let s = |v: &[usize]| g.set(v.iter().copied());
        assert!(!g.d_separated(&s(&[0]), &s(&[2]), &s(&[])));
        // {1} blocks the chain; the collider 3 stays closed.
        assert!(g.d_separated(&s(&[0]), &s(&[2]), &s(&[1])));
        // Conditioning on the collider opens 0 -> 3 <- 2.
        let p = g
            .d_connecting_path(&s(&[0]), &s(&[2]), &s(&[1, 3]))
            .unwrap();
        assert_eq!(p.nodes, vec![0, 3, 2]);
        assert_eq!(p.dirs, vec![Dir::Forward, Dir::Backward]);
    }

    #[test]
    fn cycle_is_reported() {
        let mut g = chain();
        g.add_edge(3, 0);
        let c = g.topological_order().unwrap_err();
        assert_eq!(c.first(), c.last());
        assert!(c.len() >= 3);
        assert!(chain().topological_order().is_ok());
    }

    #[test]
    fn surgery_and_paths() {
        let g = chain();
        let cut = g.without_edges_into(&g.set([3]));
        assert!(!cut.has_edge(0, 3) && !cut.has_edge(2, 3));
        assert_eq!(
            g.directed_path(&g.set([0]), &g.set([2]), &g.set([])),
            Some(vec![0, 1, 2])
        );
        assert_eq!(g.directed_path(&g.set([0]), &g.set([2]), &g.set([1])), None);
        assert_eq!(g.ancestors(&g.set([2])).to_vec(), vec![0, 1, 2]);
        let m = g.moral_graph(&g.set(0..4));
        assert!(m[0].contains(&2)); // married parents of 3
    }
}
