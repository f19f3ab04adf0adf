//! Numeric segment columns cut into quantile bins computed in the database (`--bins n`).
//!
//! Before the profile, one quantile pass per numeric segment column finds its cut points over
//! the rows the estimate uses (the filter, and no NULL in a used column); only the cuts leave
//! the database. The estimate then reads a [`Binned`] source, which adds each column's bin
//! number under a name of its own (`{column}_bin`), and groups by that instead of the column.
//! The column itself stays as it was, so a filter or a covariate that names it reads its
//! values. Segment labels show the column and the bin's range, `[low, high)`.
//!
//! Decisions: bins are left-closed, as the cuts are values of the column and the cut `i` is
//! the smallest value with at least `i / n` of the rows at or below it; tied cuts are merged
//! (fewer bins than asked, said in a note); a column with at most `n` distinct values is not
//! cut (its values are the segments already); text, boolean and declared-categorical segment
//! columns are never cut.

use crate::prepare::used_columns;
use crate::{ask_unchecked, ColumnType, Method, MethodError, Runner, Spec};
use upshot_sql::{
    complete_cases, quantile_cuts, Binned, BinnedColumn, Cuts, KeyValue, Pass, Source,
};

/// Most bins `--bins` may ask for.
pub const MAX_SEGMENT_BINS: u32 = 100;

/// A segment column cut into bins.
#[derive(Clone, Debug, PartialEq)]
pub(crate) struct SegmentBins {
    /// The column.
    pub column: String,
    /// The name its bin number is grouped by.
    pub alias: String,
    /// The bins' edges: the smallest value, the cuts, the largest value.
    pub edges: Vec<f64>,
}

impl SegmentBins {
    /// Bin `bin`'s range (bins count from 1), `[low, high)`, the last one closed.
    pub fn label(&self, bin: &KeyValue) -> String {
        let i = match bin {
            KeyValue::Number(x) if x.fract() == 0.0 && *x >= 1.0 => *x as usize,
            other => return other.to_string(),
        };
        let (Some(lo), Some(hi)) = (self.edges.get(i - 1), self.edges.get(i)) else {
            return bin.to_string();
        };
        let (lo, hi) = (KeyValue::Number(*lo), KeyValue::Number(*hi));
        if i + 1 == self.edges.len() {
            format!("[{lo}, {hi}]")
        } else {
            format!("[{lo}, {hi})")
        }
    }
}

/// The name of `column`'s bin number.
fn alias(column: &str) -> String {
    format!("{column}_bin")
}

/// The segment columns `--bins` cuts: those not declared categorical, and with a schema, the
/// numeric, non-boolean ones.
fn candidates(spec: &Spec) -> Vec<String> {
    spec.segments
        .iter()
        .filter(|c| !spec.categorical.contains(c))
        .filter(|c| {
            spec.columns.as_ref().is_none_or(|cs| {
                cs.iter()
                    .find(|k| &k.name == *c)
                    .is_none_or(|k| k.numeric && !k.boolean)
            })
        })
        .cloned()
        .collect()
}

/// Checks `--bins`: a number of bins in range, segment columns to cut, and no clash between a
/// bin number's name and the source's columns.
pub(crate) fn check(spec: &Spec) -> Result<(), MethodError> {
    let Some(n) = spec.segment_bins else {
        return Ok(());
    };
    if !(2..=MAX_SEGMENT_BINS).contains(&n) {
        return Err(MethodError::Input(format!(
            "--bins: {n} bins; use 2 to {MAX_SEGMENT_BINS}"
        )));
    }
    if spec.segments.is_empty() {
        return Err(MethodError::Input(
            "--bins cuts numeric segment columns at quantiles; name the segment columns too (--segment-by)".into(),
        ));
    }
    let cut = candidates(spec);
    if cut.is_empty() {
        return Err(MethodError::Input(format!(
            "--bins cuts numeric segment columns, and the segment columns here ({}) are text, boolean or categorical, which are segmented by their values; drop --bins, or segment by a numeric column",
            spec.segments
                .iter()
                .map(|c| format!("`{c}`"))
                .collect::<Vec<_>>()
                .join(", ")
        )));
    }
    if let Some(cs) = &spec.columns {
        if let Some(c) = cut.iter().find(|c| cs.iter().any(|k| k.name == alias(c))) {
            return Err(MethodError::Input(format!(
                "--bins: segment `{c}`'s bin number is named `{}`, and the source has a column of that name already; rename that column in a source query",
                alias(c)
            )));
        }
    }
    Ok(())
}

/// A spec whose segment columns read bin numbers, and the bins.
pub(crate) struct Cut {
    pub spec: Spec,
    pub bins: Vec<SegmentBins>,
    pub notes: Vec<String>,
}

impl Cut {
    /// Gives `setup` (prepared from [`Cut::spec`]) the bins for its segment labels and the
    /// notes on the cuts, and names a NULL bin number by the column it numbers.
    pub(crate) fn annotate(&self, setup: &mut crate::prepare::Setup) {
        setup.bins.clone_from(&self.bins);
        setup.diagnostics.notes.extend(self.notes.iter().cloned());
        for (name, _) in &mut setup.diagnostics.null_columns {
            if let Some(b) = self.bins.iter().find(|b| b.alias == *name) {
                name.clone_from(&b.column);
            }
        }
    }
}

/// The quantile pass of each column `spec` cuts.
fn passes(
    spec: &Spec,
) -> Result<Vec<(String, upshot_sql::Built<upshot_sql::CutsLayout>)>, MethodError> {
    let Some(n) = spec.segment_bins else {
        return Ok(vec![]);
    };
    let filter = complete_cases(
        spec.flavor.dialect,
        spec.filter.as_ref(),
        &used_columns(spec),
    );
    candidates(spec)
        .into_iter()
        .map(|c| {
            let p = quantile_cuts(&spec.flavor, &spec.source, filter.as_ref(), &c, n)?;
            Ok((c, p))
        })
        .collect()
}

/// The quantile passes, for `plan`.
pub(crate) fn planned(spec: &Spec) -> Result<Vec<Pass>, MethodError> {
    Ok(passes(spec)?.into_iter().map(|(_, p)| p.pass).collect())
}

/// `spec` with every column it cuts at placeholder cuts `1, 2, ..., n - 1`, for `plan`.
pub(crate) fn placeholder(spec: &Spec) -> Option<Cut> {
    let n = spec.segment_bins?;
    let cuts: Vec<f64> = (1..n).map(f64::from).collect();
    let mut edges = vec![0.0];
    edges.extend(&cuts);
    edges.push(f64::from(n));
    let bins = candidates(spec)
        .into_iter()
        .map(|column| SegmentBins {
            alias: alias(&column),
            column,
            edges: edges.clone(),
        })
        .collect();
    Some(binned(spec, bins, vec![]))
}

/// Runs the quantile passes and returns the spec that reads bin numbers (`None` without
/// `--bins`, or when no column needs cutting, or when no rows are left for the profile to
/// report).
pub(crate) fn cut(spec: &Spec, r: &mut dyn Runner) -> Result<Option<Cut>, MethodError> {
    let Some(n) = spec.segment_bins else {
        return Ok(None);
    };
    let mut bins = Vec::new();
    let mut notes = Vec::new();
    for (column, p) in passes(spec)? {
        let a = ask_unchecked(r, &p.pass)?;
        let found = p.layout.read(&a)?;
        if found.rows == 0.0 {
            return Ok(None);
        }
        if !(found.low.is_finite() && found.high.is_finite()) {
            return Err(MethodError::Input(format!(
                "segment column `{column}` holds NaN or infinite values, which no bin can hold; filter them out (for example --filter \"{column} BETWEEN -1e300 AND 1e300\")"
            )));
        }
        if found.distinct <= f64::from(n) {
            notes.push(format!(
                "segment `{column}` has {} distinct values, no more than --bins {n}: it was not cut, each value is a segment",
                found.distinct
            ));
            continue;
        }
        let spread = modelled(spec, &column);
        let (edges, merged) = edges(&found, spread);
        let b = SegmentBins {
            alias: alias(&column),
            column,
            edges,
        };
        let k = b.edges.len() - 1;
        let ranges: Vec<String> = (1..=k)
            .map(|i| b.label(&KeyValue::Number(i as f64)))
            .collect();
        notes.push(format!(
            "segment `{}` cut into {k} bins at its quantiles over the {} rows used{}: {}",
            b.column,
            found.rows,
            match (k < n as usize, merged) {
                (false, _) => String::new(),
                (true, false) => format!(" (not {n}: tied values share a cut)"),
                (true, true) => format!(
                    " (not {n}: tied values share a cut, and bins holding a single value were merged with the next, as `{}` is also a covariate of the models, which must vary within a bin)",
                    b.column
                ),
            },
            ranges.join(", ")
        ));
        bins.push(b);
    }
    if bins.is_empty() {
        return Ok(Some(Cut {
            spec: spec.clone(),
            bins,
            notes,
        }));
    }
    Ok(Some(binned(spec, bins, notes)))
}

/// Whether `column` also enters the method's models (a covariate of a method that fits
/// models), so that it must vary within each bin.
fn modelled(spec: &Spec, column: &str) -> bool {
    spec.adjust.iter().any(|c| c == column)
        && !matches!(spec.method, Method::Stratify | Method::Coarsen)
}

/// The bins' edges from the quantile pass: the smallest value, the distinct cuts above it, the
/// largest value. With `spread`, a bin holding a single value is merged with the next one
/// (the last with the one before); the second value says whether any was.
fn edges(found: &Cuts, spread: bool) -> (Vec<f64>, bool) {
    // Each edge with the next larger value after it.
    let mut edges: Vec<(f64, Option<f64>)> =
        vec![(found.low, found.after.first().copied().flatten())];
    for (i, c) in found.cuts.iter().enumerate() {
        if *c > edges.last().expect("one edge").0 {
            edges.push((*c, found.after.get(i + 1).copied().flatten()));
        }
    }
    let mut merged = false;
    if spread {
        let mut j = 0;
        while j < edges.len() {
            let upper = edges.get(j + 1).map(|e| e.0);
            // A bin holds one value when no value lies between its edge and the next.
            let single = match (edges[j].1, upper) {
                (None, _) => true,
                (Some(a), Some(u)) => a >= u,
                (Some(_), None) => false,
            };
            if !single || edges.len() == 1 {
                j += 1;
            } else if upper.is_some() {
                edges.remove(j + 1);
                merged = true;
            } else {
                edges.remove(j);
                merged = true;
            }
        }
    }
    let mut out: Vec<f64> = edges.into_iter().map(|e| e.0).collect();
    out.push(found.high);
    (out, merged)
}

/// `spec` reading the bin numbers of `bins` in place of their columns as segments.
fn binned(spec: &Spec, bins: Vec<SegmentBins>, notes: Vec<String>) -> Cut {
    let mut s = spec.clone();
    s.segment_bins = None;
    for b in &bins {
        for c in &mut s.segments {
            if *c == b.column {
                c.clone_from(&b.alias);
            }
        }
        if let Some(cs) = &mut s.columns {
            cs.push(ColumnType {
                name: b.alias.clone(),
                type_name: "INTEGER (bin number)".into(),
                numeric: true,
                integer: true,
                boolean: false,
            });
        }
    }
    s.source = Source::Binned(Box::new(Binned {
        inner: spec.source.clone(),
        columns: bins
            .iter()
            .map(|b| BinnedColumn {
                column: b.column.clone(),
                alias: b.alias.clone(),
                cuts: b.edges[1..b.edges.len() - 1].to_vec(),
            })
            .collect(),
    }));
    Cut {
        spec: s,
        bins,
        notes,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The quantile pass, and a cell table over a source with a column cut into bins, as
    /// golden files for every dialect.
    #[test]
    fn golden_quantiles_and_binned_source() {
        use crate::golden::{check, flavors};
        let src = Source::table("customers").unwrap();
        let binned = Source::Binned(Box::new(Binned {
            inner: src.clone(),
            columns: vec![BinnedColumn {
                column: "prior orders".into(),
                alias: "prior orders_bin".into(),
                cuts: vec![2.0, 4.5],
            }],
        }));
        for (dir, f) in flavors() {
            let q = quantile_cuts(&f, &src, None, "prior orders", 3).unwrap();
            check(dir, &f, "quantiles", &q.pass);
            let cells = upshot_sql::cells(
                &f,
                &binned,
                None,
                &["prior orders_bin".into(), "voucher".into()],
                "spend_30d",
            )
            .unwrap();
            check(dir, &f, "cells-binned-segment", &cells.pass);
        }
    }

    #[test]
    fn labels_are_left_closed_and_the_last_bin_is_closed() {
        let b = SegmentBins {
            column: "age".into(),
            alias: "age_bin".into(),
            edges: vec![18.0, 30.0, 44.5, 80.0],
        };
        assert_eq!(b.label(&KeyValue::Number(1.0)), "[18, 30)");
        assert_eq!(b.label(&KeyValue::Number(2.0)), "[30, 44.5)");
        assert_eq!(b.label(&KeyValue::Number(3.0)), "[44.5, 80]");
        // Anything else is shown as it is.
        assert_eq!(b.label(&KeyValue::Number(4.0)), "4");
        assert_eq!(b.label(&KeyValue::Text("NULL".into())), "NULL");
    }

    /// Values 1, 2, 3, 4, 6 with cuts 2, 2, 3 (four bins asked): the tied cut is dropped;
    /// with `spread`, the bins [1, 2) and [2, 3) hold one value each and merge upwards, and
    /// the rest stays.
    #[test]
    fn tied_cuts_merge_and_single_values_spread() {
        let found = Cuts {
            rows: 10.0,
            distinct: 5.0,
            low: 1.0,
            high: 6.0,
            cuts: vec![2.0, 2.0, 3.0],
            after: vec![Some(2.0), Some(3.0), Some(3.0), Some(4.0)],
        };
        assert_eq!(edges(&found, false), (vec![1.0, 2.0, 3.0, 6.0], false));
        assert_eq!(edges(&found, true), (vec![1.0, 3.0, 6.0], true));
        // A last bin of the largest value alone merges downwards.
        let top = Cuts {
            cuts: vec![6.0],
            after: vec![Some(2.0), None],
            ..found
        };
        assert_eq!(edges(&top, false), (vec![1.0, 6.0, 6.0], false));
        assert_eq!(edges(&top, true), (vec![1.0, 6.0], true));
    }
}
