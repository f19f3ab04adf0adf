//! Writes random diagrams, queries and upshot's answers as JSON lines, for the networkx
//! cross-check in `tests/reference/graph_networkx.py`.
//!
//! Usage: `graph-cases [--graphs N] [--seed S]` (defaults 200 graphs, seed 1). Each line holds
//! one diagram (nodes, directed edges, latent nodes) and its queries: d-separation of random
//! disjoint sets, validity of random adjustment sets (with Pearl's backdoor criterion), the
//! minimal adjustment sets upshot lists, and the implied independences it reports (pairwise, and
//! the local Markov basis of diagrams without latent variables).

use serde_json::{json, Value};
use upshot_graph::identify;
use upshot_graph::{Diagram, NodeSet};
use upshot_tests::Rng;

fn random_subset(r: &mut Rng, pool: &[usize], p: u64, cap: usize) -> NodeSet {
    NodeSet::from_iter(cap, pool.iter().copied().filter(|_| r.below(100) < p))
}

fn main() {
    let mut graphs = 200usize;
    let mut seed = 1u64;
    let args: Vec<String> = std::env::args().collect();
    let mut i = 1;
    while i < args.len() {
        let val = |i: usize| -> u64 {
            args.get(i + 1)
                .and_then(|v| v.parse().ok())
                .unwrap_or_else(|| {
                    eprintln!("graph-cases: {} needs a number", args[i]);
                    std::process::exit(2)
                })
        };
        match args[i].as_str() {
            "--graphs" => graphs = val(i) as usize,
            "--seed" => seed = val(i),
            other => {
                eprintln!("graph-cases: unknown argument `{other}`; use --graphs N --seed S");
                std::process::exit(2)
            }
        }
        i += 2;
    }
    let mut r = Rng::new(seed);
    for _ in 0..graphs {
        let n = 5 + r.below(11) as usize;
        let density = 15 + r.below(35);
        let mut text = String::new();
        let mut latent = Vec::new();
        // Random order so that node index does not equal topological position.
        let mut perm: Vec<usize> = (0..n).collect();
        for k in (1..n).rev() {
            perm.swap(k, r.below(k as u64 + 1) as usize);
        }
        for k in 0..n {
            text.push_str(&format!("n{k}\n"));
            if r.below(100) < 15 {
                text.push_str(&format!("n{k}: latent\n"));
                latent.push(format!("n{k}"));
            }
        }
        for a in 0..n {
            for b in a + 1..n {
                if r.below(100) < density {
                    text.push_str(&format!("n{} -> n{}\n", perm[a], perm[b]));
                }
            }
        }
        let d = Diagram::parse(&text).expect("generated diagram parses");
        let names = |s: &NodeSet| -> Value { json!(d.names(s)) };
        let all: Vec<usize> = (0..n).collect();
        let mut queries = Vec::new();
        for _ in 0..15 {
            let x = random_subset(&mut r, &all, 20, n);
            let rest: Vec<usize> = all.iter().copied().filter(|v| !x.contains(*v)).collect();
            let y = random_subset(&mut r, &rest, 20, n);
            let rest: Vec<usize> = rest.into_iter().filter(|v| !y.contains(*v)).collect();
            let z = random_subset(&mut r, &rest, 30, n);
            if x.is_empty() || y.is_empty() {
                continue;
            }
            queries.push(json!({
                "kind": "dsep", "x": names(&x), "y": names(&y), "z": names(&z),
                "separated": d.dag().d_separated(&x, &y, &z),
            }));
        }
        let obs: Vec<usize> = d.observed().iter().collect();
        for _ in 0..12 {
            if obs.len() < 3 {
                break;
            }
            let t = obs[r.below(obs.len() as u64) as usize];
            let mut x = d.dag().set([t]);
            if r.below(100) < 20 {
                x.insert(obs[r.below(obs.len() as u64) as usize]);
            }
            let rest: Vec<usize> = obs.iter().copied().filter(|v| !x.contains(*v)).collect();
            let yv = rest[r.below(rest.len() as u64) as usize];
            let y = d.dag().set([yv]);
            let rest: Vec<usize> = rest.into_iter().filter(|v| *v != yv).collect();
            let z = random_subset(&mut r, &rest, 35, n);
            let (minimal, complete) =
                identify::minimal_adjustment_sets(&d, &x, &y, &d.observed(), 200);
            queries.push(json!({
                "kind": "adjust", "x": names(&x), "y": names(&y), "z": names(&z),
                "valid": identify::check_adjustment(&d, &x, &y, &z).valid,
                "backdoor": identify::satisfies_backdoor(&d, &x, &y, &z),
                "minimal_sets": minimal.iter().map(|s| d.names(s)).collect::<Vec<_>>(),
                "complete": complete,
            }));
        }
        for i in identify::implied_independences(&d) {
            queries.push(json!({
                "kind": "implied", "x": [d.name(i.a)], "y": [d.name(i.b)], "z": names(&i.given), "separated": true,
            }));
        }
        if let Some(basis) = identify::local_markov_basis(&d) {
            for b in basis {
                queries.push(json!({
                    "kind": "markov", "x": [d.name(b.node)], "y": names(&b.independent_of), "z": names(&b.given), "separated": true,
                }));
            }
        }
        let (edges, _) = d.declared_edges();
        let line = json!({
            "nodes": (0..n).map(|k| format!("n{k}")).collect::<Vec<_>>(),
            "latent": latent,
            "edges": edges.iter().map(|&(a, b)| [d.name(a), d.name(b)]).collect::<Vec<_>>(),
            "queries": queries,
        });
        println!("{line}");
    }
}
