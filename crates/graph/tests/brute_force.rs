//! Exhaustive checks of the search functions against their own definitions on small random
//! diagrams: every listed minimal adjustment set is valid and minimal and none is missing;
//! instrument and front-door searches find a set exactly when one exists.
//! (The validity test itself is cross-checked against networkx's d-separation from the
//! README's test command.)

use upshot_graph::identify;
use upshot_graph::{Diagram, NodeSet};

struct Rng(u64);
impl Rng {
    fn next(&mut self) -> u64 {
        // xorshift64*
        self.0 ^= self.0 >> 12;
        self.0 ^= self.0 << 25;
        self.0 ^= self.0 >> 27;
        self.0.wrapping_mul(0x2545F4914F6CDD1D)
    }
    fn below(&mut self, n: u64) -> u64 {
        self.next() % n
    }
}

/// A random DAG on `n` nodes in the order v0..v{n-1}, some latent.
fn random_diagram(r: &mut Rng, n: usize, p: u64, latent: u64) -> Diagram {
    let mut text = String::new();
    for i in 0..n {
        text.push_str(&format!("v{i}\n"));
        if r.below(100) < latent {
            text.push_str(&format!("v{i}: latent\n"));
        }
    }
    for a in 0..n {
        for b in a + 1..n {
            if r.below(100) < p {
                text.push_str(&format!("v{a} -> v{b}\n"));
            }
        }
    }
    Diagram::parse(&text).unwrap()
}

fn subsets(items: &[usize], cap: usize) -> Vec<NodeSet> {
    (0u32..(1 << items.len()))
        .map(|m| {
            NodeSet::from_iter(
                cap,
                items
                    .iter()
                    .enumerate()
                    .filter(|(i, _)| m >> i & 1 == 1)
                    .map(|x| *x.1),
            )
        })
        .collect()
}

fn minimal_of(valid: Vec<NodeSet>) -> Vec<NodeSet> {
    let mut m: Vec<NodeSet> = valid
        .iter()
        .filter(|z| !valid.iter().any(|w| w != *z && w.is_subset(z)))
        .cloned()
        .collect();
    m.sort_by_key(|s| s.to_vec());
    m
}

#[test]
fn minimal_adjustment_sets_match_exhaustive_search() {
    let mut r = Rng(0x9E3779B97F4A7C15);
    let mut nonempty = 0;
    for _ in 0..600 {
        let n = 4 + r.below(6) as usize;
        let d = random_diagram(&mut r, n, 40, 20);
        let t = r.below(n as u64 - 1) as usize;
        let y = t + 1 + r.below((n - t - 1) as u64) as usize;
        if d.is_latent(t) || d.is_latent(y) {
            continue;
        }
        let (x, ys) = (d.dag().set([t]), d.dag().set([y]));
        let obs: Vec<usize> = d.observed().iter().filter(|&v| v != t && v != y).collect();
        let valid: Vec<NodeSet> = subsets(&obs, n)
            .into_iter()
            .filter(|z| identify::check_adjustment(&d, &x, &ys, z).valid)
            .collect();
        let expect = minimal_of(valid);
        let (mut got, complete) =
            identify::minimal_adjustment_sets(&d, &x, &ys, &d.observed(), 10_000);
        assert!(complete);
        got.sort_by_key(|s| s.to_vec());
        assert_eq!(got, expect, "diagram:\n{d}\nt=v{t} y=v{y}");
        if !got.is_empty() {
            nonempty += 1;
            // The optimal set, when found, is valid.
            if let identify::Optimal::Found(o) = identify::optimal_adjustment_set(&d, &x, &ys) {
                assert!(identify::check_adjustment(&d, &x, &ys, &o).valid);
            }
        }
        assert_eq!(
            identify::adjustment_blocked_by(&d, &x, &ys, &d.observed()).is_ok(),
            !got.is_empty()
        );
    }
    assert!(nonempty > 100, "too few identifiable cases: {nonempty}");
}

#[test]
fn instrument_search_matches_exhaustive_search() {
    let mut r = Rng(0xD1B54A32D192ED03);
    let mut found_conditional = 0;
    for _ in 0..500 {
        let n = 4 + r.below(5) as usize;
        let d = random_diagram(&mut r, n, 35, 25);
        let t = 1 + r.below(n as u64 - 2) as usize;
        let y = t + 1 + r.below((n - t - 1) as u64) as usize;
        if d.is_latent(t) || d.is_latent(y) {
            continue;
        }
        let (x, ys) = (d.dag().set([t]), d.dag().set([y]));
        let found = identify::find_instruments(&d, &x, &ys);
        for z in d.observed().iter().filter(|&v| v != t && v != y) {
            let zs = d.dag().set([z]);
            let others: Vec<usize> = d
                .observed()
                .iter()
                .filter(|&v| v != t && v != y && v != z)
                .collect();
            let exists = subsets(&others, n)
                .iter()
                .any(|w| identify::check_instrument(&d, &x, &ys, &zs, w).valid);
            let got = found.iter().find(|(fz, _)| *fz == z);
            assert_eq!(got.is_some(), exists, "diagram:\n{d}\nt=v{t} y=v{y} z=v{z}");
            if let Some((_, w)) = got {
                assert!(identify::check_instrument(&d, &x, &ys, &zs, w).valid);
                if !w.is_empty() {
                    found_conditional += 1;
                }
            }
        }
    }
    assert!(
        found_conditional > 10,
        "too few conditional instruments: {found_conditional}"
    );
}

#[test]
fn front_door_search_matches_exhaustive_search() {
    let mut r = Rng(0xBF58476D1CE4E5B9);
    let mut hits = 0;
    for _ in 0..500 {
        let n = 4 + r.below(5) as usize;
        let d = random_diagram(&mut r, n, 40, 30);
        let t = r.below(n as u64 - 1) as usize;
        let y = t + 1 + r.below((n - t - 1) as u64) as usize;
        if d.is_latent(t) || d.is_latent(y) {
            continue;
        }
        let (x, ys) = (d.dag().set([t]), d.dag().set([y]));
        // The search covers mediators, i.e. observed nodes on causal paths.
        let obs: Vec<usize> = identify::causal_nodes(d.dag(), &x, &ys)
            .intersection(&d.observed())
            .iter()
            .filter(|&v| v != y)
            .collect();
        let expect = minimal_of(
            subsets(&obs, n)
                .into_iter()
                .filter(|m| identify::check_front_door(&d, &x, &ys, m).valid)
                .collect(),
        );
        let (mut got, complete) = identify::find_front_door(&d, &x, &ys, 1 << 20);
        assert!(complete);
        got.sort_by_key(|s| s.to_vec());
        assert_eq!(got, expect, "diagram:\n{d}\nt=v{t} y=v{y}");
        hits += usize::from(!got.is_empty());
    }
    assert!(hits > 5, "too few front-door cases: {hits}");
}
