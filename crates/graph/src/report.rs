//! A name-based summary of every identification route for one question, ready to print or
//! serialise. Built only from the functions of [`crate::identify`].

use crate::diagram::Diagram;
use crate::identify::{self, Optimal, SetCheck};
use crate::set::NodeSet;
use serde::Serialize;

/// Cap on listed minimal adjustment sets (their number can grow exponentially).
pub const MAX_MINIMAL_SETS: usize = 64;
/// Cap on front-door subsets tried.
pub const FRONT_DOOR_BUDGET: usize = 100_000;

/// What the question declares beyond treatment and outcome.
#[derive(Clone, Debug, Default)]
pub struct Declared {
    /// A fixed adjustment set.
    pub adjust: Option<Vec<String>>,
    /// Fixed front-door mediators.
    pub mediators: Option<Vec<String>>,
    /// Fixed instruments.
    pub instruments: Option<Vec<String>>,
    /// Conditioning set for the instruments.
    pub instrument_given: Vec<String>,
}

/// A declared set and what was found about it.
#[derive(Clone, Debug, Serialize, PartialEq, Eq)]
pub struct CheckedSet {
    /// The set as declared.
    pub set: Vec<String>,
    /// Whether it works for its route.
    pub valid: bool,
    /// Why not, one sentence each.
    pub problems: Vec<String>,
}

impl CheckedSet {
    fn new(d: &Diagram, set: &NodeSet, c: SetCheck) -> Self {
        CheckedSet {
            set: d.sorted_names(set),
            valid: c.valid,
            problems: c.problems.iter().map(|p| p.describe(d)).collect(),
        }
    }
}

/// The adjustment (backdoor) route.
#[derive(Clone, Debug, Serialize)]
pub struct AdjustmentRoute {
    /// Whether some observed adjustment set exists.
    pub exists: bool,
    /// Inclusion-minimal observed adjustment sets, smallest first.
    pub minimal_sets: Vec<Vec<String>>,
    /// Whether `minimal_sets` lists all of them.
    pub complete: bool,
    /// The optimal (most efficient) adjustment set, when it is observed.
    pub optimal_set: Option<Vec<String>>,
    /// Why there is no optimal set to report, if there is none.
    pub optimal_note: Option<String>,
    /// Whether the optimal set, or else the first minimal set, also meets Pearl's backdoor
    /// criterion (no descendant of the treatment).
    pub meets_backdoor_criterion: Option<bool>,
    /// The declared set, checked.
    pub declared: Option<CheckedSet>,
    /// When no set exists: a non-causal path every observed set leaves open.
    pub open_path: Option<String>,
    /// When no set exists: latent variables whose measurement would make adjustment possible.
    pub measure_to_adjust: Option<Vec<String>>,
    /// ... and the adjustment set that would then work.
    pub set_if_measured: Option<Vec<String>>,
}

/// The front-door route.
#[derive(Clone, Debug, Serialize)]
pub struct FrontDoorRoute {
    /// Whether the criterion applies (one treatment, one outcome).
    pub applicable: bool,
    /// Minimal observed mediator sets meeting the criterion.
    pub sets: Vec<Vec<String>>,
    /// The declared mediators, checked.
    pub declared: Option<CheckedSet>,
    /// Why no set was found, if none.
    pub reason: Option<String>,
}

/// One instrument with its conditioning set.
#[derive(Clone, Debug, Serialize, PartialEq, Eq)]
pub struct Instrument {
    /// The instrument.
    pub instrument: String,
    /// Variables to condition on (empty: unconditional).
    pub given: Vec<String>,
}

/// The instrument route.
#[derive(Clone, Debug, Serialize)]
pub struct InstrumentRoute {
    /// Whether the criterion applies (one treatment, one outcome).
    pub applicable: bool,
    /// Observed instruments found.
    pub found: Vec<Instrument>,
    /// The declared instruments, checked one by one.
    pub declared: Vec<CheckedSet>,
    /// Why none was found, if none.
    pub reason: Option<String>,
}

/// Everything upshot knows about identifying one effect from the diagram.
#[derive(Clone, Debug, Serialize)]
pub struct Identification {
    /// Treatment names.
    pub treatment: Vec<String>,
    /// Outcome names.
    pub outcome: Vec<String>,
    /// Whether a directed path leads from treatment to outcome (if not, the effect is zero by
    /// the diagram's assumptions).
    pub causal_path: bool,
    /// A causal path, for display.
    pub example_causal_path: Option<String>,
    /// Adjustment route.
    pub adjustment: AdjustmentRoute,
    /// Front-door route.
    pub front_door: FrontDoorRoute,
    /// Instrument route.
    pub instrument: InstrumentRoute,
}

impl Identification {
    /// Whether any route identifies the effect (instruments only under extra assumptions).
    pub fn any_route(&self) -> bool {
        !self.causal_path
            || self.adjustment.exists
            || !self.front_door.sets.is_empty()
            || !self.instrument.found.is_empty()
    }
}

/// Analyses the effect of `treatment` on `outcome` (names must exist in `d`; callers check).
pub fn identify(
    d: &Diagram,
    treatment: &[String],
    outcome: &[String],
    declared: &Declared,
) -> Identification {
    let g = d.dag();
    let x = d.set_of(treatment);
    let y = d.set_of(outcome);
    let obs = d.observed();
    let path = g.directed_path(&x, &y, &g.empty_set());
    let single = x.len() == 1 && y.len() == 1;

    // Adjustment.
    let (sets, complete) = identify::minimal_adjustment_sets(d, &x, &y, &obs, MAX_MINIMAL_SETS);
    let exists = !sets.is_empty();
    let (optimal_set, optimal_note) = if !exists {
        (
            None,
            Some("no valid adjustment set among observed variables".to_string()),
        )
    } else {
        match identify::optimal_adjustment_set(d, &x, &y) {
            Optimal::Found(o) => (Some(d.sorted_names(&o)), None),
            Optimal::NeedsLatent { latent, .. } => (
                None,
                Some(format!(
                    "the optimal set would include latent {}; the minimal sets remain valid",
                    list(&d.sorted_names(&latent))
                )),
            ),
            Optimal::None => (
                None,
                Some("no causal path: the effect is zero under the diagram".to_string()),
            ),
        }
    };
    let best = optimal_set
        .as_ref()
        .map(|o| d.set_of(o))
        .or_else(|| sets.first().cloned());
    let meets_backdoor_criterion = best.map(|b| identify::satisfies_backdoor(d, &x, &y, &b));
    let mut open_path = None;
    let mut measure = None;
    let mut set_if_measured = None;
    if !exists {
        if let Err(Some(p)) = identify::adjustment_blocked_by(d, &x, &y, &obs) {
            open_path = Some(d.format_path(&p));
        }
        let all = g.set(0..g.len());
        let (with_latent, _) = identify::minimal_adjustment_sets(d, &x, &y, &all, MAX_MINIMAL_SETS);
        if let Some(s) = with_latent
            .iter()
            .min_by_key(|s| (s.difference(&obs).len(), s.len(), d.sorted_names(s)))
        {
            measure = Some(display_names(d, &s.difference(&obs)));
            set_if_measured = Some(display_names(d, s));
        }
    }
    let declared_adjust = declared.adjust.as_ref().map(|a| {
        let z = d.set_of(a);
        CheckedSet::new(d, &z, identify::check_adjustment(d, &x, &y, &z))
    });

    // Front door.
    let (fd_sets, fd_reason, fd_declared) = if single {
        let (found, exhaustive) = identify::find_front_door(d, &x, &y, FRONT_DOOR_BUDGET);
        let reason = if found.is_empty() {
            let cand = identify::causal_nodes(g, &x, &y)
                .intersection(&obs)
                .difference(&y);
            Some(if cand.is_empty() {
                "no observed variable lies on a causal path from the treatment to the outcome"
                    .to_string()
            } else {
                let c = identify::check_front_door(d, &x, &y, &cand);
                let first = c
                    .problems
                    .first()
                    .map(|p| p.describe(d))
                    .unwrap_or_else(|| "no subset meets all three conditions".to_string());
                let mut s = format!(
                    "no observed mediator set meets the front-door conditions (all observed mediators {}: {first})",
                    list(&d.sorted_names(&cand))
                );
                if !exhaustive {
                    s.push_str("; search stopped early");
                }
                s
            })
        } else {
            None
        };
        let declared = declared.mediators.as_ref().map(|m| {
            let ms = d.set_of(m);
            CheckedSet::new(d, &ms, identify::check_front_door(d, &x, &y, &ms))
        });
        (
            found.iter().map(|s| d.sorted_names(s)).collect(),
            reason,
            declared,
        )
    } else {
        (
            Vec::new(),
            Some(
                "the front-door criterion is checked for one treatment and one outcome".to_string(),
            ),
            None,
        )
    };

    // Instruments.
    let given = d.set_of(&declared.instrument_given);
    let (found, iv_reason, iv_declared) = if single {
        let found: Vec<Instrument> = identify::find_instruments(d, &x, &y)
            .into_iter()
            .map(|(z, w)| Instrument {
                instrument: d.name(z).to_string(),
                given: d.sorted_names(&w),
            })
            .collect();
        let reason = found.is_empty().then(|| {
            "no observed variable moves the treatment while reaching the outcome only through it (given any observed set not affected by the treatment)".to_string()
        });
        let declared = declared
            .instruments
            .iter()
            .flatten()
            .map(|z| {
                let zs = d.set_of(std::slice::from_ref(z));
                CheckedSet::new(d, &zs, identify::check_instrument(d, &x, &y, &zs, &given))
            })
            .collect();
        (found, reason, declared)
    } else {
        (
            Vec::new(),
            Some("instruments are checked for one treatment and one outcome".to_string()),
            Vec::new(),
        )
    };

    Identification {
        treatment: treatment.to_vec(),
        outcome: outcome.to_vec(),
        causal_path: path.is_some(),
        example_causal_path: path.map(|p| d.format_chain(&p)),
        adjustment: AdjustmentRoute {
            exists,
            minimal_sets: sets.iter().map(|s| d.sorted_names(s)).collect(),
            complete,
            optimal_set,
            optimal_note,
            meets_backdoor_criterion,
            declared: declared_adjust,
            open_path,
            measure_to_adjust: measure,
            set_if_measured,
        },
        front_door: FrontDoorRoute {
            applicable: single,
            sets: fd_sets,
            declared: fd_declared,
            reason: fd_reason,
        },
        instrument: InstrumentRoute {
            applicable: single,
            found,
            declared: iv_declared,
            reason: iv_reason,
        },
    }
}

/// A conditional independence, by name.
#[derive(Clone, Debug, Serialize, PartialEq, Eq)]
pub struct NamedIndependence {
    /// One variable.
    pub a: String,
    /// The other.
    pub b: String,
    /// Conditioning set, sorted.
    pub given: Vec<String>,
}

/// Most variables a diagram may have for [`markov_basis`] to list its statements.
pub const MAX_MARKOV_VARIABLES: usize = 500;

/// Most non-adjacent pairs [`implied`] examines: enough for every diagram a person draws
/// (60 variables have at most 1,770 pairs), and a bound on the time large generated diagrams
/// take (each pair costs a moralisation and a separator search).
pub const MAX_IMPLIED_PAIRS: usize = 2_000;

/// The diagram's implied independences among observed variables, by name, from at most
/// [`MAX_IMPLIED_PAIRS`] non-adjacent pairs; and how many pairs were left unexamined.
pub fn implied(d: &Diagram) -> (Vec<NamedIndependence>, usize) {
    let (found, unexamined) = identify::implied_independences_up_to(d, MAX_IMPLIED_PAIRS);
    let named = found
        .into_iter()
        .map(|i| NamedIndependence {
            a: d.name(i.a).to_string(),
            b: d.name(i.b).to_string(),
            given: d.sorted_names(&i.given),
        })
        .collect();
    (named, unexamined)
}

/// Sorted names, with the stand-in of `a <-> b` shown as "a common cause of a and b".
fn display_names(d: &Diagram, s: &NodeSet) -> Vec<String> {
    let mut v: Vec<String> = s
        .iter()
        .map(|i| match d.node(i).confounds {
            Some((a, b)) => format!("a common cause of {} and {}", d.name(a), d.name(b)),
            None => d.name(i).to_string(),
        })
        .collect();
    v.sort();
    v
}

fn list(names: &[String]) -> String {
    format!("{{{}}}", names.join(", "))
}

/// A local Markov statement, by name.
#[derive(Clone, Debug, Serialize, PartialEq, Eq)]
pub struct NamedMarkovStatement {
    /// The variable.
    pub variable: String,
    /// Non-descendants other than parents, sorted.
    pub independent_of: Vec<String>,
    /// Parents, sorted.
    pub given: Vec<String>,
}

/// The local Markov basis by name (`None` when the diagram has latent variables, or more than
/// [`MAX_MARKOV_VARIABLES`] variables).
pub fn markov_basis(d: &Diagram) -> Option<Vec<NamedMarkovStatement>> {
    // Its statements list every non-descendant of every variable: quadratic in size (a 30,000-node
    // chain needed tens of GB), so large diagrams get the bounded pairwise list instead.
    if d.len() > MAX_MARKOV_VARIABLES {
        return None;
    }
    identify::local_markov_basis(d).map(|b| {
        b.into_iter()
            .map(|s| NamedMarkovStatement {
                variable: d.name(s.node).to_string(),
                independent_of: d.sorted_names(&s.independent_of),
                given: d.sorted_names(&s.given),
            })
            .collect()
    })
}
