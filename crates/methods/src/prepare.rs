//! The passes every method starts with: the profile (counts, NULLs, ranges, centres, scales)
//! and the levels of categorical covariates; the checks they allow; the design terms.

use crate::{
    ask, ask_unchecked, ColumnType, Diagnostics, Method, MethodError, NullPolicy, Runner, Spec,
};
use serde::Serialize;
use upshot_sql::{
    complete_cases, levels, nonfinite, profile, Aggregates, Built, Cell, DesignTerm, Expr,
    LevelRow, LevelsLayout, ProfileColumn, ProfileLayout, ProfiledCell, ProfiledColumn,
};

/// Most levels a categorical covariate may have for one-hot encoding.
pub const MAX_LEVELS: usize = 100;

/// Basis expansion of the covariates.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize)]
pub struct Basis {
    /// Add squares of numeric covariates.
    pub squares: bool,
    /// Add products of every pair of covariate terms from different columns.
    pub interactions: bool,
}

/// A profiled column.
#[derive(Clone, Debug, PartialEq)]
pub(crate) struct Profiled {
    pub name: String,
    pub non_null: f64,
    pub min: Cell,
    pub max: Cell,
    pub mean: Option<f64>,
    pub sd: Option<f64>,
    pub distinct: f64,
    /// Non-NULL values that are neither 0 nor 1 (counted for the treatment only; else 0).
    pub not01: f64,
}

/// Everything a method needs after the first passes.
pub(crate) struct Setup<'a> {
    pub spec: &'a Spec,
    /// The user's filter and "no NULL in a used column".
    pub filter: Option<Expr>,
    /// Covariate terms (after one-hot and basis expansion) and their names.
    pub terms: Vec<DesignTerm>,
    pub term_names: Vec<String>,
    /// The treatment and the outcome as centred, scaled terms (for Gram passes).
    pub treatment_term: DesignTerm,
    pub outcome_term: DesignTerm,
    /// The excluded instruments as centred, scaled terms (`iv`; empty otherwise): a numeric
    /// instrument as itself, a categorical one as indicators of its levels.
    pub instrument_terms: Vec<DesignTerm>,
    pub instrument_names: Vec<String>,
    pub profiled: Vec<Profiled>,
    pub diagnostics: Diagnostics,
    /// Segment columns read as bin numbers (`--bins`), for their labels.
    pub bins: Vec<crate::segment_bins::SegmentBins>,
    /// The complete cells of a first pass that was also the profile (`stratify`'s cell
    /// table), so the estimator does not run it again.
    pub cells: Option<Aggregates>,
}

impl Setup<'_> {
    pub fn column(&self, name: &str) -> Option<&Profiled> {
        self.profiled.iter().find(|p| p.name == name)
    }

    /// The segment columns as group keys of a design.
    pub fn segment_keys(&self) -> Vec<upshot_sql::Key> {
        self.spec
            .segments
            .iter()
            .map(|c| upshot_sql::Key::Column(c.clone()))
            .collect()
    }
}

fn edit_distance(a: &str, b: &str) -> usize {
    let b: Vec<char> = b.chars().collect();
    let mut prev: Vec<usize> = (0..=b.len()).collect();
    for (i, ca) in a.chars().enumerate() {
        let mut cur = vec![i + 1];
        for (j, cb) in b.iter().enumerate() {
            let sub = prev[j] + usize::from(ca != *cb);
            cur.push(sub.min(prev[j + 1] + 1).min(cur[j] + 1));
        }
        prev = cur;
    }
    prev[b.len()]
}

fn suggest(name: &str, columns: &[ColumnType]) -> String {
    let best = columns
        .iter()
        .map(|c| {
            (
                edit_distance(&name.to_lowercase(), &c.name.to_lowercase()),
                &c.name,
            )
        })
        .min();
    match best {
        Some((d, n)) if d <= 2 + name.len() / 4 => format!("; did you mean `{n}`?"),
        _ => String::new(),
    }
}

/// The columns a spec reads, in a fixed order: treatment, outcome, adjustment set,
/// instruments, mediators, segments, unit key (when folds need it, and for `match`, whose
/// per-row table is keyed by it).
pub(crate) fn used_columns(spec: &Spec) -> Vec<String> {
    let mut used: Vec<String> = Vec::new();
    let mut add = |c: &String| {
        if !used.contains(c) {
            used.push(c.clone());
        }
    };
    add(&spec.treatment);
    add(&spec.outcome);
    spec.adjust.iter().for_each(&mut add);
    spec.instruments.iter().for_each(&mut add);
    spec.mediators.iter().for_each(&mut add);
    spec.segments.iter().for_each(&mut add);
    if needs_folds(spec) || spec.method == Method::Match {
        if let Some(u) = &spec.unit {
            add(u);
        }
    }
    used
}

pub(crate) fn needs_folds(spec: &Spec) -> bool {
    wants_folds(spec) && spec.unit.is_some()
}

/// Whether the method cross-fits with the spec's folds (it does so only with a unit key).
pub(crate) fn wants_folds(spec: &Spec) -> bool {
    spec.folds > 1 && matches!(spec.method, Method::DoublyRobust | Method::PartialOut)
}

/// The note of an estimate made without cross-fitting for want of a unit key. upshot's
/// decision: folds come from a portable hash of an integer unit key, the same on every engine;
/// without one there is no row identity every engine hashes alike, so the nuisance models are
/// fitted on all rows. With upshot's nuisance models (linear outcome models, a logistic
/// propensity: a fixed, small number of parameters) the estimate stays consistent and its
/// interval valid without cross-fitting; cross-fitting guards against overfitting by richer
/// models (basis expansions).
pub(crate) fn no_unit_note(spec: &Spec) -> Option<String> {
    (wants_folds(spec) && spec.unit.is_none()).then(|| format!(
        "no unit key was named, so the nuisance models were fitted on all rows instead of cross-fitted over {} folds (valid for upshot's linear and logistic models with a fixed number of terms); name an integer unit key (--unit, or [source].unit) to cross-fit",
        spec.folds
    ))
}

/// The adjustment columns that enter models or strata: the adjustment set minus the segment
/// columns (constant within a segment; grouping by them already adjusts for them).
pub(crate) fn modelled(spec: &Spec) -> Vec<String> {
    spec.adjust
        .iter()
        .filter(|c| !spec.segments.contains(c))
        .cloned()
        .collect()
}

/// Whether `name` is one-hot encoded: a non-numeric column, or one declared categorical.
pub(crate) fn is_categorical(spec: &Spec, name: &str) -> bool {
    spec.categorical.iter().any(|c| c == name)
        || spec
            .columns
            .as_ref()
            .and_then(|cs| cs.iter().find(|c| c.name == name))
            .is_some_and(|c| !c.numeric)
}

/// Checks names and types against the schema (when known).
pub(crate) fn check_schema(spec: &Spec) -> Result<(), MethodError> {
    let Some(columns) = &spec.columns else {
        return Ok(());
    };
    let list = || {
        columns
            .iter()
            .map(|c| c.name.as_str())
            .collect::<Vec<_>>()
            .join(", ")
    };
    for c in used_columns(spec) {
        if !columns.iter().any(|k| k.name == c) {
            return Err(MethodError::Input(format!(
                "no column `{c}` in the source{}; its columns are: {}",
                suggest(&c, columns),
                list()
            )));
        }
    }
    let col = |n: &str| columns.iter().find(|c| c.name == n).expect("checked");
    if !col(&spec.outcome).numeric {
        return Err(MethodError::Input(format!(
            "outcome `{}` is not numeric (its type is {}); choose a numeric outcome, or convert it in a source query (for example CAST(... AS DOUBLE), or a 0/1 CASE expression)",
            spec.outcome,
            col(&spec.outcome).type_name
        )));
    }
    if !col(&spec.treatment).numeric {
        return Err(MethodError::Input(format!(
            "treatment `{}` is not numeric (its type is {}); code it as 0/1 (untreated/treated){}",
            spec.treatment,
            col(&spec.treatment).type_name,
            if spec.method.needs_binary_treatment() {
                ""
            } else {
                " or as a number"
            }
        )));
    }
    if needs_folds(spec) {
        match &spec.unit {
            Some(u) if !col(u).integer => {
                return Err(MethodError::Input(format!(
                    "unit key `{u}` is not an integer column; folds are a portable hash of an integer key. Use an integer id, or --folds 1"
                )))
            }
            _ => {}
        }
    }
    Ok(())
}

fn profiled(p: ProfiledColumn, name: &str) -> Profiled {
    let sd = scale(&p);
    Profiled {
        name: name.to_string(),
        non_null: p.non_null,
        min: p.min,
        max: p.max,
        mean: p.mean,
        sd,
        // Counted only where a check needs it (see `profile_pass`); 0 = not counted.
        distinct: p.distinct,
        not01: p.not01,
    }
}

fn show(c: &Cell) -> String {
    match c {
        Cell::Null => "NULL".into(),
        Cell::Number(x) => format!("{x}"),
        Cell::Text(t) => t.clone(),
    }
}

/// The population standard deviation of a profiled column from its mean and sum of squares,
/// for scaling: `√(Σx²/n − x̄²)`. Where cancellation leaves nothing (a mean vastly larger than
/// the spread) but the column is not constant, half its range stands in; a constant column
/// gets 0 (checked against min = max by the callers).
fn scale(p: &ProfiledColumn) -> Option<f64> {
    let (Some(mean), Some(ss), Cell::Number(lo), Cell::Number(hi)) =
        (p.mean, p.sum_sq, &p.min, &p.max)
    else {
        return None;
    };
    if lo == hi {
        return Some(0.0);
    }
    let var = ss / p.non_null - mean * mean;
    let sd = var.max(0.0).sqrt();
    Some(if sd > 1e-6 * (hi - lo) {
        sd
    } else {
        (hi - lo) / 2.0
    })
}

/// Largest magnitude a used numeric value may have. Passes sum products of up to four values
/// over every row (squared weights times squared outcomes, fourth powers of residuals), which
/// overflow a double well before the values themselves do; no count, amount or rate of a
/// business table comes near 1e30, and refusing beyond it keeps every sum finite for any
/// table size an engine holds.
pub const MAX_MAGNITUDE: f64 = 1e30;

/// The profiled numeric columns holding a value that is not a finite number within
/// ±[`MAX_MAGNITUDE`] (NaN, an infinity, or a larger magnitude), by their minimum and maximum.
fn extreme_columns(cols: &[Profiled]) -> Vec<String> {
    cols.iter()
        .filter(|c| {
            [&c.min, &c.max]
                .into_iter()
                .any(|v| matches!(v, Cell::Number(x) if !x.is_finite() || x.abs() > MAX_MAGNITUDE))
        })
        .map(|c| c.name.clone())
        .collect()
}

/// The column as a filter may name it: bare when it is a plain lower-case identifier, else
/// double-quoted.
fn filter_name(c: &str) -> String {
    let plain = c
        .chars()
        .next()
        .is_some_and(|f| f.is_ascii_lowercase() || f == '_')
        && c.chars()
            .all(|x| x.is_ascii_lowercase() || x.is_ascii_digit() || x == '_');
    if plain {
        c.to_string()
    } else {
        format!("\"{}\"", c.replace('"', "\"\""))
    }
}

fn row_count(n: f64) -> String {
    if n == 1.0 {
        "1 row".into()
    } else {
        format!("{n} rows")
    }
}

/// The refusal of columns holding NaN, infinities or magnitudes beyond [`MAX_MAGNITUDE`]: one
/// more pass (over the rows `filter` keeps) counts the offending rows of each kind, so the
/// message says which column, how many rows and what they hold, and what to do.
pub(crate) fn refuse_extremes(
    spec: &Spec,
    filter: Option<&Expr>,
    columns: &[String],
    r: &mut dyn Runner,
) -> MethodError {
    let built = match nonfinite(&spec.flavor, &spec.source, filter, columns, MAX_MAGNITUDE) {
        Ok(b) => b,
        Err(e) => return e.into(),
    };
    let a = match ask_unchecked(r, &built.pass) {
        Ok(a) => a,
        Err(e) => return e,
    };
    let mut parts = Vec::new();
    let mut beyond_only = true;
    let mut any_beyond = false;
    for (i, c) in columns.iter().enumerate() {
        let k = match built.layout.column(&a, i) {
            Ok(k) => k,
            Err(e) => return e.into(),
        };
        let mut kinds = Vec::new();
        if k.nan > 0.0 {
            kinds.push(format!("NaN (not-a-number) in {}", row_count(k.nan)));
        }
        if k.pos_inf > 0.0 {
            kinds.push(format!("+infinity in {}", row_count(k.pos_inf)));
        }
        if k.neg_inf > 0.0 {
            kinds.push(format!("-infinity in {}", row_count(k.neg_inf)));
        }
        if k.nan + k.pos_inf + k.neg_inf > 0.0 {
            beyond_only = false;
        }
        if k.beyond > 0.0 {
            any_beyond = true;
            kinds.push(format!(
                "magnitudes beyond ±{MAX_MAGNITUDE:e} in {}",
                row_count(k.beyond)
            ));
        }
        if kinds.is_empty() {
            // The profile saw such a value but the count did not (the data changed between
            // the passes): say what the profile saw.
            kinds.push("a value that is not a finite number".into());
        }
        parts.push(format!("column `{c}` holds {}", kinds.join(", ")));
    }
    let keep = columns
        .iter()
        .map(|c| {
            let n = filter_name(c);
            format!("{n} BETWEEN -{MAX_MAGNITUDE:e} AND {MAX_MAGNITUDE:e}")
        })
        .collect::<Vec<_>>()
        .join(" AND ");
    let exclude = if beyond_only {
        format!("exclude those rows with --filter \"{keep}\"")
    } else {
        format!("exclude those rows with --filter \"{keep}\" (NaN and the infinities fall outside that range in DuckDB, PostgreSQL and Spark SQL)")
    };
    MethodError::Input(if beyond_only {
        format!(
            "{}: sums of their products would overflow. Rescale the column in a source query (for example divide it by a power of ten) and read the estimate in the new unit, or {exclude}",
            parts.join("; ")
        )
    } else {
        format!(
            "{}: these are not numbers an estimate can use. Fix the data, or {exclude}{}",
            parts.join("; "),
            if any_beyond {
                "; rescale a column whose large magnitudes are real"
            } else {
                ""
            }
        )
    })
}

/// Whether the profile computes column `c`'s numeric statistics (min, max, mean, sum of
/// squares): numeric columns that a later pass centres and scales, and the treatment (its
/// checks). Stratify fits no design, so of its columns only the treatment needs them — at 10M
/// rows the statistics of the outcome and strata cost as much as the rest of its profile.
fn with_stats(spec: &Spec, c: &str) -> bool {
    let numeric = !is_categorical(spec, c) || c == spec.treatment || c == spec.outcome;
    numeric && (spec.method != Method::Stratify || c == spec.treatment)
}

/// Whether the profile counts column `c`'s distinct values. They serve one check: discrete
/// numeric strata. A 0/1 treatment is checked exactly, by counting the other values.
fn counts_distinct(spec: &Spec, c: &str) -> bool {
    let numeric = !is_categorical(spec, c) || c == spec.treatment || c == spec.outcome;
    spec.method == Method::Stratify
        && numeric
        && c != spec.outcome
        && c != spec.treatment
        && modelled(spec).iter().any(|m| m == c)
}

/// The profile pass of a spec.
pub(crate) fn profile_pass(spec: &Spec) -> Result<Built<ProfileLayout>, MethodError> {
    let cols: Vec<ProfileColumn> = used_columns(spec)
        .into_iter()
        .map(|c| {
            ProfileColumn {
                numeric: with_stats(spec, &c),
                distinct: counts_distinct(spec, &c),
                // The treatment's and the instruments' 0/1 values are counted (binary
                // instruments give the Wald ratio and the complier share).
                zero_one: c == spec.treatment
                    || ((spec.instruments.contains(&c) || spec.mediators.contains(&c))
                        && !is_categorical(spec, &c)),
                name: c,
            }
        })
        .collect();
    Ok(profile(
        &spec.flavor,
        &spec.source,
        spec.filter.as_ref(),
        &cols,
    )?)
}

/// Categorical covariates (and instruments) that need their levels (methods with a design
/// matrix).
pub(crate) fn categorical_covariates(spec: &Spec) -> Vec<String> {
    if matches!(spec.method, Method::Stratify | Method::Coarsen) {
        return vec![];
    }
    modelled(spec)
        .into_iter()
        .chain(spec.instruments.iter().cloned())
        .filter(|c| is_categorical(spec, c))
        .collect()
}

pub(crate) fn levels_pass(
    spec: &Spec,
    filter: Option<&Expr>,
) -> Result<Option<Built<LevelsLayout>>, MethodError> {
    let cats = categorical_covariates(spec);
    if cats.is_empty() {
        return Ok(None);
    }
    let arm = spec
        .method
        .needs_binary_treatment()
        .then_some(spec.treatment.as_str());
    Ok(Some(levels(
        &spec.flavor,
        &spec.source,
        filter,
        &cats,
        &used_columns(spec),
        &spec.segments,
        arm,
    )?))
}

/// What the profile says of the rows the user's filter keeps: their count, the rows with no
/// NULL in a used column, and each used column (in [`used_columns`] order).
pub(crate) struct Facts {
    pub n_rows: f64,
    pub n_complete: f64,
    pub columns: Vec<Profiled>,
}

/// Runs the profile pass.
fn profile_facts(spec: &Spec, r: &mut dyn Runner) -> Result<Facts, MethodError> {
    let pp = profile_pass(spec)?;
    let prof = ask_unchecked(r, &pp)?;
    let mut columns = Vec::new();
    for (i, c) in used_columns(spec).iter().enumerate() {
        columns.push(profiled(pp.layout.column(&prof, i)?, c));
    }
    Ok(Facts {
        n_rows: pp.layout.rows(&prof)?,
        n_complete: pp.layout.complete(&prof)?,
        columns,
    })
}

/// The profile a cell table over every row gives ([`upshot_sql::profiled_cells`], every group
/// read): `keys` are its key columns, `value` the column it sums. Each used column must be one
/// of them. A key's statistics come from its values weighted by their rows — the same numbers
/// the profile pass computes (distinct counts exact rather than approximate); the value's
/// count and range from the groups' counts and ranges (it gets no mean: a cell table fits no
/// design).
pub(crate) fn cell_facts(
    spec: &Spec,
    keys: &[String],
    value: &str,
    cells: &[ProfiledCell],
) -> Facts {
    let n_rows: f64 = cells.iter().map(|c| c.rows).sum();
    let n_complete: f64 = cells
        .iter()
        .filter(|c| !c.keys.iter().any(|k| matches!(k, Cell::Null)))
        .map(|c| c.n)
        .sum();
    let columns = used_columns(spec)
        .into_iter()
        .map(|name| match keys.iter().position(|k| *k == name) {
            Some(i) => key_facts(spec, &name, cells, i),
            None if name == value => {
                let (min, max) = range(cells.iter().flat_map(|c| [&c.y_min, &c.y_max]));
                Profiled {
                    non_null: cells.iter().map(|c| c.n).sum(),
                    min,
                    max,
                    mean: None,
                    sd: None,
                    distinct: 0.0,
                    not01: 0.0,
                    name,
                }
            }
            // Not in the table: nothing known (callers pass every used column as a key or
            // the value).
            None => Profiled {
                non_null: 0.0,
                min: Cell::Null,
                max: Cell::Null,
                mean: None,
                sd: None,
                distinct: 0.0,
                not01: 0.0,
                name,
            },
        })
        .collect();
    Facts {
        n_rows,
        n_complete,
        columns,
    }
}

/// Smallest and largest of some cells: numbers, else texts; NaN among the numbers makes the
/// largest NaN (as an engine's MAX orders it), so the range check sees it. NULLs are skipped.
fn range<'c>(values: impl Iterator<Item = &'c Cell>) -> (Cell, Cell) {
    let mut lo: Option<&Cell> = None;
    let mut hi: Option<&Cell> = None;
    let mut nan = false;
    for v in values {
        let below = |a: &Cell, b: &Cell| match (a, b) {
            (Cell::Number(a), Cell::Number(b)) => a < b,
            (Cell::Text(a), Cell::Text(b)) => a < b,
            _ => false,
        };
        match v {
            Cell::Null => continue,
            Cell::Number(x) if x.is_nan() => {
                nan = true;
                continue;
            }
            _ => {}
        }
        if lo.is_none_or(|l| below(v, l)) {
            lo = Some(v);
        }
        if hi.is_none_or(|h| below(h, v)) {
            hi = Some(v);
        }
    }
    let lo = lo.cloned().unwrap_or(Cell::Null);
    let hi = if nan {
        Cell::Number(f64::NAN)
    } else {
        hi.cloned().unwrap_or(Cell::Null)
    };
    (lo, hi)
}

/// Key `i` of a cell table, profiled as [`profile_pass`] profiles its column.
fn key_facts(spec: &Spec, name: &str, cells: &[ProfiledCell], i: usize) -> Profiled {
    let present: Vec<(&Cell, f64)> = cells
        .iter()
        .filter_map(|c| c.keys.get(i).map(|k| (k, c.rows)))
        .filter(|(k, _)| !matches!(k, Cell::Null))
        .collect();
    let non_null: f64 = present.iter().map(|(_, n)| n).sum();
    let numbers: Option<Vec<(f64, f64)>> = present
        .iter()
        .map(|(k, n)| match k {
            Cell::Number(x) => Some((*x, *n)),
            _ => None,
        })
        .collect();
    let stats = with_stats(spec, name);
    let (min, max) = if stats {
        range(present.iter().map(|(k, _)| *k))
    } else {
        (Cell::Null, Cell::Null)
    };
    let (mean, sum_sq) = match (&numbers, stats && non_null > 0.0) {
        (Some(xs), true) => (
            Some(xs.iter().map(|(x, n)| x * n).sum::<f64>() / non_null),
            Some(xs.iter().map(|(x, n)| x * x * n).sum::<f64>()),
        ),
        _ => (None, None),
    };
    let not01 = if name == spec.treatment {
        present
            .iter()
            .filter(|(k, _)| !matches!(k, Cell::Number(x) if *x == 0.0 || *x == 1.0))
            .map(|(_, n)| n)
            .sum()
    } else {
        0.0
    };
    // Up to `MAX_CELLS` groups: a hash set, by the bits of a number (+0 for −0) or the text.
    let distinct = if counts_distinct(spec, name) {
        let seen: std::collections::HashSet<(u64, Option<&str>)> = present
            .iter()
            .map(|(k, _)| match k {
                Cell::Number(x) => ((x + 0.0).to_bits(), None),
                Cell::Text(t) => (0, Some(t.as_str())),
                Cell::Null => (0, None),
            })
            .collect();
        seen.len() as f64
    } else {
        0.0
    };
    profiled(
        ProfiledColumn {
            non_null,
            min,
            max,
            mean,
            sum_sq,
            not01,
            distinct,
        },
        name,
    )
}

/// Runs the profile (and levels) passes, checks the data, and builds the design terms.
pub(crate) fn prepare<'a>(spec: &'a Spec, r: &mut dyn Runner) -> Result<Setup<'a>, MethodError> {
    check_schema(spec)?;
    let facts = profile_facts(spec, r)?;
    prepare_from(spec, facts, r)
}

/// Checks the data by what its profile says (from the profile pass, or from a first pass that
/// is its own profile), runs the levels pass where there are categorical covariates, and
/// builds the design terms.
pub(crate) fn prepare_from<'a>(
    spec: &'a Spec,
    facts: Facts,
    r: &mut dyn Runner,
) -> Result<Setup<'a>, MethodError> {
    let used = used_columns(spec);
    let Facts {
        n_rows,
        n_complete,
        columns: profiled_cols,
    } = facts;
    if n_rows == 0.0 {
        return Err(MethodError::Input(if spec.filter.is_some() {
            "no rows: the source is empty after the filter; check the filter and the source".into()
        } else {
            "no rows: the source is empty".into()
        }));
    }
    let null_columns: Vec<(String, f64)> = profiled_cols
        .iter()
        .filter(|p| p.non_null < n_rows)
        .map(|p| (p.name.clone(), n_rows - p.non_null))
        .collect();
    let nulls_text = || {
        null_columns
            .iter()
            .map(|(c, n)| format!("`{c}` {n} NULL"))
            .collect::<Vec<_>>()
            .join(", ")
    };
    if n_complete == 0.0 {
        return Err(MethodError::Input(format!(
            "no usable rows: each of the {n_rows} rows has a NULL in a used column ({}); fill or drop those columns",
            nulls_text()
        )));
    }
    let excluded = n_rows - n_complete;
    if excluded > 0.0 && spec.on_null == NullPolicy::Error {
        return Err(MethodError::Input(format!(
            "{excluded} of {n_rows} rows have NULL in a used column ({}); with --on-null error nothing is estimated. Filter them out, fill them, or drop --on-null error to exclude and count them",
            nulls_text()
        )));
    }
    let col = |n: &str| {
        profiled_cols
            .iter()
            .find(|p| p.name == n)
            .expect("profiled")
    };
    let extreme = extreme_columns(&profiled_cols);
    if !extreme.is_empty() {
        return Err(refuse_extremes(spec, spec.filter.as_ref(), &extreme, r));
    }
    if let Some(c) = profiled_cols
        .iter()
        .find(|c| c.mean.is_some_and(|m| !m.is_finite()) || c.sd.is_some_and(|s| !s.is_finite()))
    {
        return Err(MethodError::Input(format!(
            "column `{}`: its sum of squares overflows; rescale it in a source query (for example divide it by a power of ten)",
            c.name
        )));
    }
    let t = col(&spec.treatment);
    let (tmin, tmax) = (show(&t.min), show(&t.max));
    if t.sd == Some(0.0) || tmin == tmax {
        return Err(MethodError::Input(format!(
            "treatment `{}` is constant ({tmin} in every row used); an effect needs treated and untreated rows — check the filter and the source",
            spec.treatment
        )));
    }
    if spec.method.needs_binary_treatment() {
        let zero_one = matches!((&t.min, &t.max), (Cell::Number(a), Cell::Number(b)) if *a == 0.0 && *b == 1.0);
        if !zero_one || t.not01 > 0.0 {
            return Err(MethodError::Input(format!(
                "method `{}` needs a 0/1 treatment, but `{}` ranges from {tmin} to {tmax} and {} of its values are neither 0 nor 1; recode it as 0/1, or use --method partial-out for a continuous treatment",
                spec.method.as_str(),
                spec.treatment,
                t.not01
            )));
        }
    }
    let filter = complete_cases(spec.flavor.dialect, spec.filter.as_ref(), &used);
    let mut coded: Vec<Coded> = Vec::new();
    let mut notes = Vec::new();
    if let Some(p) = levels_pass(spec, filter.as_ref())? {
        let a = ask(r, &p)?;
        let cats = categorical_covariates(spec);
        let mut rows_of: Vec<Vec<LevelRow>> = vec![Vec::new(); cats.len()];
        for row in 0..a.rows.len() {
            let l = p.layout.level(&a, row)?;
            if let Some(v) = rows_of.get_mut(l.which) {
                v.push(l);
            }
        }
        for (c, rows) in cats.iter().zip(&rows_of) {
            let mut distinct: Vec<&str> = rows.iter().map(|l| l.level.as_str()).collect();
            distinct.dedup();
            if distinct.len() > MAX_LEVELS {
                let text = spec
                    .columns
                    .as_ref()
                    .and_then(|cs| cs.iter().find(|k| &k.name == c))
                    .is_some_and(|k| !k.numeric);
                return Err(MethodError::Input(if text {
                    format!(
                        "covariate `{c}` is a text column with {} distinct values: if it holds numbers, convert it in a source query (CAST({c} AS DOUBLE)); if it is a category, coarsen it to at most {MAX_LEVELS} levels",
                        distinct.len()
                    )
                } else {
                    format!(
                        "covariate `{c}` has {} levels, too many to one-hot (at most {MAX_LEVELS}); coarsen it in a source query, or treat it as numeric",
                        distinct.len()
                    )
                }));
            }
            let (code, note) = code_levels(spec, c, rows)?;
            coded.push(code);
            notes.extend(note);
        }
    }
    let mut setup = Setup {
        spec,
        filter,
        terms: vec![],
        term_names: vec![],
        treatment_term: numeric_term(t)?,
        outcome_term: if spec.method == Method::Stratify {
            // Stratify fits no design: the term is never used, and the profile skips the
            // outcome's statistics.
            DesignTerm::Numeric {
                column: spec.outcome.clone(),
                centre: 0.0,
                scale: 1.0,
            }
        } else {
            numeric_term(col(&spec.outcome))?
        },
        instrument_terms: vec![],
        instrument_names: vec![],
        profiled: profiled_cols.clone(),
        diagnostics: Diagnostics {
            rows_read: n_rows,
            rows_excluded_null: excluded,
            null_columns,
            notes: no_unit_note(spec).into_iter().chain(notes).collect(),
            ..Diagnostics::default()
        },
        bins: vec![],
        cells: None,
    };
    if !matches!(spec.method, Method::Stratify | Method::Coarsen) {
        let (terms, names) = covariate_terms(spec, &profiled_cols, &coded)?;
        setup.terms = terms;
        setup.term_names = names;
        let (terms, names) = instrument_terms(spec, &profiled_cols, &coded)?;
        setup.instrument_terms = terms;
        setup.instrument_names = names;
    }
    Ok(setup)
}

/// The indicators of a coded categorical column as centred, scaled terms (centre: the level's
/// share; scale: its binomial standard deviation), with their names.
fn level_terms(code: &Coded, terms: &mut Vec<DesignTerm>, names: &mut Vec<String>) {
    for g in &code.indicators {
        let share = g.rows / code.rows;
        terms.push(DesignTerm::Level {
            column: code.column.clone(),
            levels: g.levels.clone(),
            centre: share,
            scale: (share * (1.0 - share)).sqrt(),
        });
        names.push(g.name.clone());
    }
}

/// The instruments as centred, scaled terms and their names: a numeric instrument as itself,
/// a categorical one as the indicators of its levels (coded like a covariate's). A constant
/// instrument is refused.
fn instrument_terms(
    spec: &Spec,
    profiled: &[Profiled],
    coded: &[Coded],
) -> Result<(Vec<DesignTerm>, Vec<String>), MethodError> {
    let mut terms = Vec::new();
    let mut names = Vec::new();
    for z in &spec.instruments {
        if let Some(code) = coded.iter().find(|k| &k.column == z) {
            level_terms(code, &mut terms, &mut names);
            continue;
        }
        let p = profiled.iter().find(|p| &p.name == z).expect("profiled");
        if p.sd == Some(0.0) {
            return Err(MethodError::Input(format!(
                "instrument `{z}` is constant ({} in every row used); it cannot move the treatment — check the filter and the source, or name another instrument",
                show(&p.min)
            )));
        }
        terms.push(numeric_term(p)?);
        names.push(z.clone());
    }
    Ok((terms, names))
}

pub(crate) fn numeric_term(p: &Profiled) -> Result<DesignTerm, MethodError> {
    let (Some(mean), Some(sd)) = (p.mean, p.sd) else {
        return Err(MethodError::Input(format!(
            "column `{}` has no numeric values to centre",
            p.name
        )));
    };
    Ok(DesignTerm::Numeric {
        column: p.name.clone(),
        centre: mean,
        scale: if sd > 0.0 { sd } else { 1.0 },
    })
}

/// Fewest rows a level of a categorical covariate needs, in each treatment arm of every
/// segment (methods with a 0/1 treatment; in all rows of every segment otherwise), to get an
/// indicator of its own. upshot's rule, after the common practice of about ten observations
/// per fitted parameter (the events-per-variable rule of thumb for logistic models, Peduzzi et
/// al. 1996, cited from memory): below it an arm's model sees a constant or near-constant
/// indicator, and the propensity model a perfectly predicted level.
pub const MIN_LEVEL_ROWS: f64 = 10.0;

/// One indicator of a categorical covariate: a level, or a pool of rare levels.
#[derive(Clone, Debug, PartialEq)]
pub(crate) struct Group {
    /// The term's name (`column=level`, or `column=(rare levels)`).
    pub name: String,
    pub levels: Vec<String>,
    pub rows: f64,
}

/// A categorical covariate as the design codes it: its indicators (every group but the
/// reference) and its rows.
#[derive(Clone, Debug, PartialEq)]
pub(crate) struct Coded {
    pub column: String,
    pub indicators: Vec<Group>,
    pub rows: f64,
}

/// The counts of one level (or pool) per segment: `(segment values, rows, treated rows)`.
type PerSegment = Vec<(Vec<String>, f64, Option<f64>)>;

fn enough(counts: &PerSegment, segments: &[Vec<String>]) -> bool {
    segments.iter().all(|s| {
        counts.iter().any(|(k, n, t)| {
            k == s
                && match t {
                    Some(t) => t.min(n - t) >= MIN_LEVEL_ROWS,
                    None => *n >= MIN_LEVEL_ROWS,
                }
        })
    })
}

fn add_counts(pool: &mut PerSegment, counts: &PerSegment) {
    for (k, n, t) in counts {
        match pool.iter_mut().find(|(j, _, _)| j == k) {
            Some(e) => {
                e.1 += n;
                e.2 = e.2.zip(*t).map(|(a, b)| a + b);
            }
            None => pool.push((k.clone(), *n, *t)),
        }
    }
}

fn level_list(levels: &[String]) -> String {
    const SHOWN: usize = 8;
    let mut s = levels
        .iter()
        .take(SHOWN)
        .map(|l| format!("`{l}`"))
        .collect::<Vec<_>>()
        .join(", ");
    if levels.len() > SHOWN {
        s.push_str(&format!(" and {} more", levels.len() - SHOWN));
    }
    s
}

/// Codes a categorical covariate from the levels pass (`rows`: its levels per segment, ordered
/// by level). upshot's rule ([`MIN_LEVEL_ROWS`]): a level with enough rows in each arm of every
/// segment gets an indicator; the others are pooled into one indicator `column=(rare levels)`
/// when the pool has enough rows, or else counted with the reference level (the most frequent
/// level with enough rows). Either way a note names the levels. Refused when no two groups are
/// left: the covariate could not adjust anything.
pub(crate) fn code_levels(
    spec: &Spec,
    c: &str,
    rows: &[LevelRow],
) -> Result<(Coded, Option<String>), MethodError> {
    let mut levels: Vec<(String, PerSegment)> = Vec::new();
    let mut segments: Vec<Vec<String>> = Vec::new();
    for l in rows {
        if !segments.contains(&l.by) {
            segments.push(l.by.clone());
        }
        if levels.last().is_none_or(|(name, _)| name != &l.level) {
            levels.push((l.level.clone(), Vec::new()));
        }
        if let Some(last) = levels.last_mut() {
            last.1.push((l.by.clone(), l.n, l.treated));
        }
    }
    // A segment lacking an arm is refused by the method with its own message; the rule looks
    // only at the segments that can be estimated.
    segments.retain(|s| {
        let (mut n, mut t) = (0.0, Some(0.0));
        for l in rows.iter().filter(|l| &l.by == s) {
            n += l.n;
            t = t.zip(l.treated).map(|(a, b)| a + b);
        }
        t.is_none_or(|t| t > 0.0 && t < n)
    });
    if levels.len() < 2 {
        let level = levels
            .first()
            .map(|l| format!(" ({})", l.0))
            .unwrap_or_default();
        return Err(MethodError::Input(
            if spec.instruments.iter().any(|z| z == c) {
                format!("instrument `{c}` has a single level{level} in the rows used; it cannot move the treatment — check the filter and the source, or name another instrument")
            } else {
                format!("covariate `{c}` has a single level{level} in the rows used; it cannot adjust anything — drop it from the adjustment set")
            },
        ));
    }
    let total = |counts: &PerSegment| counts.iter().map(|x| x.1).sum::<f64>();
    let rows_all: f64 = levels.iter().map(|l| total(&l.1)).sum();
    let (kept, rare): (Vec<_>, Vec<_>) = levels
        .iter()
        .partition(|(_, counts)| enough(counts, &segments));
    let arms = rows.first().is_some_and(|l| l.treated.is_some());
    let where_ = match (arms, spec.segments.is_empty()) {
        (true, true) => " in each treatment arm",
        (true, false) => " in each treatment arm of every segment",
        (false, true) => "",
        (false, false) => " in every segment",
    };
    let rule = format!("a level needs {MIN_LEVEL_ROWS} rows{where_} for an indicator of its own");
    let Some(reference) = kept
        .iter()
        .enumerate()
        .max_by(|a, b| {
            total(&a.1 .1)
                .total_cmp(&total(&b.1 .1))
                .then(b.0.cmp(&a.0))
        })
        .map(|x| x.1 .0.clone())
    else {
        return Err(MethodError::Input(format!(
            "covariate `{c}`: none of its {} levels has enough rows to adjust for ({rule}); coarsen it in a source query (group its levels into fewer, larger ones), or estimate with fewer segments",
            levels.len()
        )));
    };
    let mut indicators: Vec<Group> = kept
        .iter()
        .filter(|(l, _)| *l != reference)
        .map(|(l, counts)| Group {
            name: format!("{c}={l}"),
            levels: vec![l.clone()],
            rows: total(counts),
        })
        .collect();
    let mut note = None;
    if !rare.is_empty() {
        let names: Vec<String> = rare.iter().map(|(l, _)| l.clone()).collect();
        let mut pool = PerSegment::new();
        for (_, counts) in &rare {
            add_counts(&mut pool, counts);
        }
        let n = total(&pool);
        if enough(&pool, &segments) {
            note = Some(format!(
                "covariate `{c}`: {} ({}) share one indicator `{c}=(rare levels)` ({rule})",
                level_list(&names),
                row_count(n)
            ));
            indicators.push(Group {
                name: format!("{c}=(rare levels)"),
                levels: names,
                rows: n,
            });
        } else {
            note = Some(format!(
                "covariate `{c}`: {} ({}) {} counted with its reference level `{reference}` ({rule}; even pooled they fall short), so the estimate does not adjust for the difference between them and `{reference}`; coarsen `{c}` in a source query to choose the grouping yourself",
                level_list(&names),
                row_count(n),
                if names.len() == 1 { "is" } else { "are" }
            ));
        }
    }
    if indicators.is_empty() {
        return Err(MethodError::Input(format!(
            "covariate `{c}`: only its level `{reference}` has enough rows to adjust for ({rule}); coarsen it in a source query (group its levels into fewer, larger ones), or estimate with fewer segments"
        )));
    }
    Ok((
        Coded {
            column: c.to_string(),
            indicators,
            rows: rows_all,
        },
        note,
    ))
}

/// The covariate terms: numeric columns centred and scaled; categorical columns one-hot
/// (an indicator per coded group but the reference, see [`code_levels`]); then the basis
/// expansion.
pub(crate) fn covariate_terms(
    spec: &Spec,
    profiled: &[Profiled],
    coded: &[Coded],
) -> Result<(Vec<DesignTerm>, Vec<String>), MethodError> {
    let mut terms = Vec::new();
    let mut names = Vec::new();
    let mut numeric_base = Vec::new();
    for c in &modelled(spec) {
        if let Some(code) = coded.iter().find(|k| &k.column == c) {
            level_terms(code, &mut terms, &mut names);
        } else {
            let p = profiled.iter().find(|p| &p.name == c).expect("profiled");
            if p.sd.unwrap_or(0.0) <= 0.0 {
                return Err(MethodError::Input(format!(
                    "covariate `{c}` is constant ({}) in the rows used; it cannot adjust anything — drop it from the adjustment set",
                    show(&p.min)
                )));
            }
            numeric_base.push(terms.len());
            terms.push(numeric_term(p)?);
            names.push(c.clone());
        }
    }
    let base: Vec<(DesignTerm, String)> =
        terms.iter().cloned().zip(names.iter().cloned()).collect();
    if spec.basis.squares {
        for &i in &numeric_base {
            terms.push(DesignTerm::Product {
                factors: vec![base[i].0.clone(), base[i].0.clone()],
                centre: 1.0,
                scale: 1.0,
            });
            names.push(format!("{}^2", base[i].1));
        }
    }
    if spec.basis.interactions {
        for i in 0..base.len() {
            for j in i + 1..base.len() {
                if base[i].0.column() == base[j].0.column() {
                    continue;
                }
                terms.push(DesignTerm::Product {
                    factors: vec![base[i].0.clone(), base[j].0.clone()],
                    centre: 0.0,
                    scale: 1.0,
                });
                names.push(format!("{}*{}", base[i].1, base[j].1));
            }
        }
    }
    Ok((terms, names))
}

/// A placeholder setup for `plan`: no pass is run; centres 0, scales 1, two placeholder
/// levels per categorical covariate.
pub(crate) fn placeholder<'a>(spec: &'a Spec) -> Result<Setup<'a>, MethodError> {
    check_schema(spec)?;
    let used = used_columns(spec);
    let profiled: Vec<Profiled> = used
        .iter()
        .map(|c| Profiled {
            name: c.clone(),
            non_null: 1.0,
            min: Cell::Number(0.0),
            max: Cell::Number(1.0),
            mean: Some(0.0),
            sd: Some(1.0),
            distinct: 2.0,
            not01: 0.0,
        })
        .collect();
    let coded: Vec<Coded> = categorical_covariates(spec)
        .into_iter()
        .map(|c| Coded {
            indicators: vec![Group {
                name: format!("{c}=<level 2>"),
                levels: vec![format!("<{c} level 2>")],
                rows: 1.0,
            }],
            column: c,
            rows: 2.0,
        })
        .collect();
    let (terms, term_names) = if matches!(spec.method, Method::Stratify | Method::Coarsen) {
        (vec![], vec![])
    } else {
        covariate_terms(spec, &profiled, &coded)?
    };
    let instruments = instrument_terms(spec, &profiled, &coded)?;
    Ok(Setup {
        spec,
        filter: complete_cases(spec.flavor.dialect, spec.filter.as_ref(), &used),
        terms,
        term_names,
        treatment_term: numeric_term(&profiled[0])?,
        outcome_term: numeric_term(&profiled[1])?,
        instrument_terms: instruments.0,
        instrument_names: instruments.1,
        profiled,
        diagnostics: Diagnostics::default(),
        bins: vec![],
        cells: None,
    })
}
