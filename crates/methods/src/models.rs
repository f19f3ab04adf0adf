//! Per-group models: fitted coefficients keyed by segment (and, when cross-fitting, by the
//! held-out fold), as the passes inline them; and the placeholder models of `plan`.

use crate::crossfit::folds;
use crate::prepare::{needs_folds, Setup};
use upshot_sql::{KeyValue, Model, Models, Selector};

/// Models keyed by segment values.
pub(crate) fn per_segment(segs: &[Vec<KeyValue>], coefs: &[Vec<f64>]) -> Models {
    let nseg = segs.first().map_or(0, |k| k.len());
    if nseg == 0 {
        return Models::single(coefs[0].clone());
    }
    Models {
        selector: Selector {
            keys: (0..nseg).collect(),
            fold: false,
        },
        models: segs
            .iter()
            .zip(coefs)
            .map(|(k, c)| Model {
                key: k.clone(),
                coef: c.clone(),
            })
            .collect(),
    }
}

pub(crate) fn placeholder_segments(s: &Setup) -> Vec<Vec<KeyValue>> {
    vec![s
        .spec
        .segments
        .iter()
        .map(|_| KeyValue::Text("<each segment>".into()))
        .collect()]
}

/// Models chosen by segment and (when cross-fitting) the row's fold; `coef[i][j]` belongs to
/// segment `i` and held-out fold `j`.
pub(crate) fn fold_models(s: &Setup, segs: &[Vec<KeyValue>], coef: &[Vec<Vec<f64>>]) -> Models {
    let nseg = s.spec.segments.len();
    let crossfit = needs_folds(s.spec);
    let mut models = Vec::new();
    for (seg, per_fold) in segs.iter().zip(coef) {
        for (j, c) in per_fold.iter().enumerate() {
            let mut key = seg.clone();
            if crossfit {
                key.push(KeyValue::Number(j as f64));
            }
            models.push(Model {
                key,
                coef: c.clone(),
            });
        }
    }
    if nseg == 0 && !crossfit {
        return Models::single(models.remove(0).coef);
    }
    Models {
        selector: Selector {
            keys: (0..nseg).collect(),
            fold: crossfit,
        },
        models,
    }
}

pub(crate) fn placeholder(s: &Setup) -> (Vec<Vec<KeyValue>>, Vec<Vec<Vec<f64>>>) {
    let segs = placeholder_segments(s);
    let k = folds(s) as usize;
    let coef = vec![vec![vec![0.0; s.terms.len() + 1]; k]; segs.len()];
    (segs, coef)
}
