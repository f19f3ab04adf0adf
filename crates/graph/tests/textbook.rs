//! Textbook identification cases with known answers, written from the definitions:
//! Pearl (2009) *Causality* (backdoor criterion def. 3.3.1, front-door def. 3.3.3, instruments
//! sec. 7.4.5), Shpitser, VanderWeele & Robins (2010) for the adjustment criterion, and
//! Henckel, Perković & Maathuis (2022) for optimal sets. Expected answers were derived by hand
//! from those definitions, not by running this code.

use upshot_graph::identify::{self, Optimal, Problem};
use upshot_graph::report::{identify as report, implied, Declared};
use upshot_graph::{Diagram, NodeSet};

fn d(text: &str) -> Diagram {
    Diagram::parse(text).unwrap()
}

fn set(d: &Diagram, names: &[&str]) -> NodeSet {
    let names: Vec<String> = names.iter().map(|s| s.to_string()).collect();
    for n in &names {
        assert!(d.index_of(n).is_some(), "unknown {n}");
    }
    d.set_of(&names)
}

fn minimal(d: &Diagram, t: &[&str], y: &[&str]) -> Vec<Vec<String>> {
    let (sets, complete) =
        identify::minimal_adjustment_sets(d, &set(d, t), &set(d, y), &d.observed(), 100);
    assert!(complete);
    sets.iter().map(|s| d.sorted_names(s)).collect()
}

fn valid(d: &Diagram, z: &[&str]) -> bool {
    identify::check_adjustment(d, &set(d, &["t"]), &set(d, &["y"]), &set(d, z)).valid
}

fn v(names: &[&str]) -> Vec<String> {
    names.iter().map(|s| s.to_string()).collect()
}

#[test]
fn confounder() {
    let g = d("c -> t -> y; c -> y");
    assert_eq!(minimal(&g, &["t"], &["y"]), vec![v(&["c"])]);
    let c = identify::check_adjustment(&g, &set(&g, &["t"]), &set(&g, &["y"]), &set(&g, &[]));
    assert!(!c.valid);
    match &c.problems[0] {
        Problem::OpenPath(p) => assert_eq!(g.format_path(p), "t <- c -> y"),
        other => panic!("{other:?}"),
    }
    assert_eq!(
        identify::optimal_adjustment_set(&g, &set(&g, &["t"]), &set(&g, &["y"])),
        Optimal::Found(set(&g, &["c"]))
    );
}

#[test]
fn mediator_must_not_be_adjusted() {
    let g = d("c -> t -> m -> y; c -> y; m -> after");
    assert!(valid(&g, &["c"]));
    let c = identify::check_adjustment(
        &g,
        &set(&g, &["t"]),
        &set(&g, &["y"]),
        &set(&g, &["c", "m"]),
    );
    assert!(
        matches!(&c.problems[..], [Problem::Mediator { .. }]),
        "{:?}",
        c.problems
    );
    assert!(c.problems[0].describe(&g).contains("t -> m -> y"));
    let c = identify::check_adjustment(
        &g,
        &set(&g, &["t"]),
        &set(&g, &["y"]),
        &set(&g, &["c", "after"]),
    );
    assert!(
        matches!(&c.problems[..], [Problem::DescendantOfMediator { .. }]),
        "{:?}",
        c.problems
    );
}

#[test]
fn m_bias_collider() {
    let g = d("a -> t; a -> m; b -> m; b -> y; t -> y");
    assert!(valid(&g, &[]));
    assert!(!valid(&g, &["m"]));
    assert!(valid(&g, &["m", "a"]) && valid(&g, &["m", "b"]));
    assert_eq!(minimal(&g, &["t"], &["y"]), vec![Vec::<String>::new()]);
    // O = pa(y) \ forb = {b}.
    assert_eq!(
        identify::optimal_adjustment_set(&g, &set(&g, &["t"]), &set(&g, &["y"])),
        Optimal::Found(set(&g, &["b"]))
    );
}

#[test]
fn butterfly_bias() {
    let g = d("a -> m <- b; a -> t; b -> y; m -> t; m -> y; t -> y");
    assert!(!valid(&g, &["m"]));
    assert!(!valid(&g, &[]));
    assert_eq!(
        minimal(&g, &["t"], &["y"]),
        vec![v(&["a", "m"]), v(&["b", "m"])]
    );
    assert_eq!(
        identify::optimal_adjustment_set(&g, &set(&g, &["t"]), &set(&g, &["y"])),
        Optimal::Found(set(&g, &["b", "m"]))
    );
}

#[test]
fn adjustment_criterion_is_wider_than_backdoor() {
    // w is a descendant of t that is not on a causal path: allowed by the adjustment criterion
    // (Shpitser et al. 2010), not by Pearl's backdoor criterion.
    let g = d("c -> t -> y; c -> y; t -> w");
    assert!(valid(&g, &["c", "w"]));
    assert!(!identify::satisfies_backdoor(
        &g,
        &set(&g, &["t"]),
        &set(&g, &["y"]),
        &set(&g, &["c", "w"])
    ));
    assert!(identify::satisfies_backdoor(
        &g,
        &set(&g, &["t"]),
        &set(&g, &["y"]),
        &set(&g, &["c"])
    ));
}

#[test]
fn front_door() {
    let g = d("t -> m -> y; t <-> y");
    let r = report(&g, &v(&["t"]), &v(&["y"]), &Declared::default());
    assert!(!r.adjustment.exists);
    assert_eq!(r.adjustment.open_path.as_deref(), Some("t <-> y"));
    assert_eq!(
        r.adjustment.measure_to_adjust,
        Some(v(&["a common cause of t and y"]))
    );
    assert_eq!(r.front_door.sets, vec![v(&["m"])]);
    assert!(r.instrument.found.is_empty());
    // Each condition, broken in turn.
    let bypass = d("t -> m -> y; t -> y; t <-> y");
    let c = identify::check_front_door(
        &bypass,
        &set(&bypass, &["t"]),
        &set(&bypass, &["y"]),
        &set(&bypass, &["m"]),
    );
    assert!(
        matches!(&c.problems[..], [Problem::Bypass(_)]),
        "{:?}",
        c.problems
    );
    let tm = d("t -> m -> y; t <-> y; t <-> m");
    let c =
        identify::check_front_door(&tm, &set(&tm, &["t"]), &set(&tm, &["y"]), &set(&tm, &["m"]));
    assert!(
        c.problems
            .iter()
            .any(|p| matches!(p, Problem::TreatmentMediatorPath(_))),
        "{:?}",
        c.problems
    );
    let my = d("t -> m -> y; t <-> y; m <-> y");
    let c =
        identify::check_front_door(&my, &set(&my, &["t"]), &set(&my, &["y"]), &set(&my, &["m"]));
    assert!(
        matches!(&c.problems[..], [Problem::MediatorOutcomePath(_)]),
        "{:?}",
        c.problems
    );
}

#[test]
fn instruments() {
    let g = d("z -> t -> y; t <-> y");
    let found = identify::find_instruments(&g, &set(&g, &["t"]), &set(&g, &["y"]));
    assert_eq!(found, vec![(g.index_of("z").unwrap(), set(&g, &[]))]);
    // Conditional: z shares a cause w with y; z is an instrument given w only.
    let g = d("w -> z; w -> y; z -> t -> y; t <-> y");
    let (t, y, z) = (set(&g, &["t"]), set(&g, &["y"]), set(&g, &["z"]));
    let c = identify::check_instrument(&g, &t, &y, &z, &set(&g, &[]));
    assert!(
        matches!(&c.problems[..], [Problem::ExclusionPath(_)]),
        "{:?}",
        c.problems
    );
    assert!(identify::check_instrument(&g, &t, &y, &z, &set(&g, &["w"])).valid);
    let found = identify::find_instruments(&g, &t, &y);
    assert!(
        found.contains(&(g.index_of("z").unwrap(), set(&g, &["w"]))),
        "{found:?}"
    );
    // A direct path from the instrument to the outcome breaks exclusion whatever we condition on.
    let g = d("z -> t -> y; z -> y; t <-> y");
    assert!(identify::find_instruments(&g, &set(&g, &["t"]), &set(&g, &["y"])).is_empty());
    // An instrument affected by the treatment is not one.
    let g = d("t -> z; t -> y");
    let c = identify::check_instrument(
        &g,
        &set(&g, &["t"]),
        &set(&g, &["y"]),
        &set(&g, &["z"]),
        &set(&g, &[]),
    );
    assert!(
        c.problems
            .iter()
            .any(|p| matches!(p, Problem::AffectedByTreatment(_))),
        "{:?}",
        c.problems
    );
}

#[test]
fn latent_confounding_without_any_route() {
    let g = d("u: latent\nu -> t; u -> y; t -> y; c -> t; c -> y");
    let r = report(&g, &v(&["t"]), &v(&["y"]), &Declared::default());
    assert!(!r.any_route());
    assert_eq!(r.adjustment.open_path.as_deref(), Some("t <- u -> y"));
    assert_eq!(r.adjustment.measure_to_adjust, Some(v(&["u"])));
    assert!(r.front_door.reason.is_some() && r.instrument.reason.is_some());
}

#[test]
fn multiple_treatments() {
    // Joint effect of t1 and t2; c confounds t1, k confounds t2 and is affected by t1.
    let g = d("c -> t1 -> k -> t2 -> y; c -> y; k -> y; t1 -> y");
    let x = set(&g, &["t1", "t2"]);
    let y = set(&g, &["y"]);
    assert!(!identify::check_adjustment(&g, &x, &y, &set(&g, &["c", "k"])).valid);
    // k is on the causal path t1 -> k -> y, so no adjustment set exists for the joint effect.
    let (sets, _) = identify::minimal_adjustment_sets(&g, &x, &y, &g.observed(), 10);
    assert!(sets.is_empty());
    let g = d("c -> t1 -> y; c -> y; e -> t2 -> y; e -> y");
    let (sets, _) = identify::minimal_adjustment_sets(
        &g,
        &set(&g, &["t1", "t2"]),
        &set(&g, &["y"]),
        &g.observed(),
        10,
    );
    assert_eq!(
        sets.iter().map(|s| g.sorted_names(s)).collect::<Vec<_>>(),
        vec![v(&["c", "e"])]
    );
}

#[test]
fn no_causal_path() {
    let g = d("t <- c -> y");
    let r = report(&g, &v(&["t"]), &v(&["y"]), &Declared::default());
    assert!(!r.causal_path);
    assert!(r.any_route());
}

#[test]
fn implied_independences_of_a_chain_and_collider() {
    let g = d("a -> b -> c; a -> d <- e");
    let ind: Vec<String> = implied(&g)
        .0
        .iter()
        .map(|i| {
            let (a, b) = if i.a < i.b {
                (&i.a, &i.b)
            } else {
                (&i.b, &i.a)
            };
            format!("{a} _||_ {b} | {}", i.given.join(","))
        })
        .collect();
    assert!(ind.contains(&"a _||_ c | b".to_string()), "{ind:?}");
    assert!(ind.contains(&"a _||_ e | ".to_string()), "{ind:?}");
    assert!(ind
        .iter()
        .all(|s| !s.contains("d _||_") || !s.contains("| d")));
    // A latent common cause makes a pair untestable.
    let g = d("a <-> b");
    assert!(implied(&g).0.is_empty());
}
