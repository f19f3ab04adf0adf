//! Typed layouts of pass results: each builder returns its pass with a layout, and callers
//! read the few result rows through it — by meaning (`n`, the sums of a Gram block, a logistic
//! fit's score) rather than by column names, which only the builder and its layout know.

use crate::aggregates::{Aggregates, Cell, ResultError};
use crate::design::{KeyValue, Pass};

/// A pass and the layout of its result.
#[derive(Clone, Debug, PartialEq)]
pub struct Built<L> {
    /// The pass.
    pub pass: Pass,
    /// How to read its result rows.
    pub layout: L,
}

impl<L> std::ops::Deref for Built<L> {
    type Target = Pass;
    fn deref(&self) -> &Pass {
        &self.pass
    }
}

impl KeyValue {
    /// A group key's value as a pass returned it (NULL reads as the text `NULL`).
    pub fn from_cell(c: &Cell) -> KeyValue {
        match c {
            Cell::Number(x) => KeyValue::Number(*x),
            Cell::Text(t) => KeyValue::Text(t.clone()),
            Cell::Null => KeyValue::Text("NULL".into()),
        }
    }
}

/// The values of the first `n` group keys of a result row (every grouped pass names its keys
/// `k0`, `k1`, ... in the order of its design's keys).
pub fn group_keys(a: &Aggregates, row: usize, n: usize) -> Result<Vec<KeyValue>, ResultError> {
    (0..n)
        .map(|i| Ok(KeyValue::from_cell(a.cell(row, &format!("k{i}"))?)))
        .collect()
}

fn upper(a: &Aggregates, row: usize, prefix: &str, p: usize) -> Result<Vec<f64>, ResultError> {
    let mut out = Vec::with_capacity(p * (p + 1) / 2);
    for i in 0..p {
        for j in i..p {
            out.push(a.number_or(row, &format!("{prefix}{i}_{j}"), 0.0)?);
        }
    }
    Ok(out)
}

fn vector(a: &Aggregates, row: usize, prefix: &str, p: usize) -> Result<Vec<f64>, ResultError> {
    (0..p)
        .map(|i| a.number_or(row, &format!("{prefix}{i}"), 0.0))
        .collect()
}

/// The layout of a centred Gram pass over `terms` design terms.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct GramLayout {
    /// Group keys.
    pub keys: usize,
    /// Design terms.
    pub terms: usize,
}

impl GramLayout {
    /// The row's group keys.
    pub fn keys(&self, a: &Aggregates, row: usize) -> Result<Vec<KeyValue>, ResultError> {
        group_keys(a, row, self.keys)
    }
    /// Rows in the group.
    pub fn n(&self, a: &Aggregates, row: usize) -> Result<f64, ResultError> {
        a.number(row, "n")
    }
    /// `Σ v_i` per term.
    pub fn sums(&self, a: &Aggregates, row: usize) -> Result<Vec<f64>, ResultError> {
        vector(a, row, "s", self.terms)
    }
    /// `Σ v_i v_j`, `i ≤ j`, row by row (the upper triangle).
    pub fn products(&self, a: &Aggregates, row: usize) -> Result<Vec<f64>, ResultError> {
        upper(a, row, "g", self.terms)
    }
}

/// The layout of a residual-moments pass: `Σ e² w_i w_j` over `w = (1, v...)`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct ResidualLayout {
    /// Group keys.
    pub keys: usize,
    /// `1 +` design terms.
    pub width: usize,
}

impl ResidualLayout {
    /// The row's group keys.
    pub fn keys(&self, a: &Aggregates, row: usize) -> Result<Vec<KeyValue>, ResultError> {
        group_keys(a, row, self.keys)
    }
    /// The HC1 meat `Σ e² w_i w_j`, `i ≤ j`, row by row.
    pub fn meat(&self, a: &Aggregates, row: usize) -> Result<Vec<f64>, ResultError> {
        upper(a, row, "r", self.width)
    }
    /// The pooled model's `Σ e² w_i w_j` over the row's group ([`crate::passes::residuals_and_pooled`]).
    pub fn pooled_meat(&self, a: &Aggregates, row: usize) -> Result<Vec<f64>, ResultError> {
        upper(a, row, "q", self.width)
    }
}

/// One logistic fit's sums in a result row.
#[derive(Clone, Debug, PartialEq)]
pub struct LogisticRow {
    /// Rows in the group.
    pub n: f64,
    /// `Σ w_i (t − p)`.
    pub score: Vec<f64>,
    /// `Σ p (1 − p) w_i w_j`, `i ≤ j`, row by row (empty for a scores-only pass, whose
    /// log-likelihood and extreme probabilities are not computed either).
    pub information: Vec<f64>,
    /// The log-likelihood.
    pub loglik: f64,
    /// Smallest fitted probability.
    pub min_p: f64,
    /// Largest fitted probability.
    pub max_p: f64,
}

/// The layout of a logistic pass ([`crate::logistic_fits`]).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct LogisticLayout {
    /// The design's group keys (the fold `f` follows them in fold-grouped passes).
    pub keys: usize,
    /// `1 +` design terms.
    pub width: usize,
    /// Whether the rows are grouped by the row's fold too.
    pub by_fold: bool,
    /// Whether the pass returns scores only.
    pub scores_only: bool,
}

impl LogisticLayout {
    /// The row's design keys.
    pub fn keys(&self, a: &Aggregates, row: usize) -> Result<Vec<KeyValue>, ResultError> {
        group_keys(a, row, self.keys)
    }
    /// The row's treated rows (`Σ t`).
    pub fn treated(&self, a: &Aggregates, row: usize) -> Result<f64, ResultError> {
        a.number(row, "n1")
    }
    /// The row's fold (0 in a pass not grouped by fold).
    pub fn fold(&self, a: &Aggregates, row: usize) -> Result<usize, ResultError> {
        if !self.by_fold {
            return Ok(0);
        }
        Ok(a.number(row, "f")? as usize)
    }
    /// The sums of fit `fit`: `None` for the single fit, `Some(m)` for the cross-fitting fit
    /// that leaves fold `m` out.
    pub fn fit(
        &self,
        a: &Aggregates,
        row: usize,
        fit: Option<usize>,
    ) -> Result<LogisticRow, ResultError> {
        let pre = fit.map_or(String::new(), |m| format!("m{m}_"));
        let n = a.number(row, "n")?;
        let score = vector(a, row, &format!("{pre}u"), self.width)?;
        if self.scores_only {
            return Ok(LogisticRow {
                n,
                score,
                information: vec![],
                loglik: 0.0,
                min_p: 0.5,
                max_p: 0.5,
            });
        }
        Ok(LogisticRow {
            n,
            score,
            information: upper(a, row, &format!("{pre}h"), self.width)?,
            loglik: a.number_or(row, &format!("{pre}loglik"), 0.0)?,
            min_p: a.number_or(row, &format!("{pre}min_p"), 0.5)?,
            max_p: a.number_or(row, &format!("{pre}max_p"), 0.5)?,
        })
    }
}

/// The layout of a logistic pass grouped by arm that carries Gram sums
/// ([`crate::logistic_fits_with_gram`]): its rows read as a logistic pass's (a group's fit
/// adds up its rows) and as a Gram pass's, each row one arm of its group.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct LogisticGramLayout {
    /// The logistic sums.
    pub logistic: LogisticLayout,
    /// The Gram sums (its keys are the design's, without the fold and the arm).
    pub gram: GramLayout,
}

impl LogisticGramLayout {
    /// The row's arm: whether its `t` is 1.
    pub fn treated_arm(&self, a: &Aggregates, row: usize) -> Result<bool, ResultError> {
        Ok(a.number(row, "t")? == 1.0)
    }
}

/// The layout of a cell table: per cell of the keys, `n`, `Σ y`, `Σ y²`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct CellsLayout {
    /// Keys (segments, strata, treatment).
    pub keys: usize,
}

impl CellsLayout {
    /// The row's cell keys.
    pub fn keys(&self, a: &Aggregates, row: usize) -> Result<Vec<KeyValue>, ResultError> {
        group_keys(a, row, self.keys)
    }
    /// `(n, Σ y, Σ y²)` of the cell.
    pub fn sums(&self, a: &Aggregates, row: usize) -> Result<(f64, f64, f64), ResultError> {
        Ok((
            a.number(row, "n")?,
            a.number(row, "sy")?,
            a.number(row, "syy")?,
        ))
    }
}

/// One group of a profiled cell table: its keys as read (NULL included), its rows, and the
/// outcome's count, sums and range over them.
#[derive(Clone, Debug, PartialEq)]
pub struct ProfiledCell {
    /// The keys, NULL where the group is the key's NULLs.
    pub keys: Vec<Cell>,
    /// Rows in the group.
    pub rows: f64,
    /// Rows with an outcome.
    pub n: f64,
    /// Smallest outcome (NULL when none).
    pub y_min: Cell,
    /// Largest outcome.
    pub y_max: Cell,
}

/// The layout of the cell table that is its own profile ([`crate::passes::profiled_cells`]).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct ProfiledCellsLayout {
    /// The cells, as [`CellsLayout`] reads them once the groups with a NULL are set apart
    /// ([`ProfiledCellsLayout::complete`]).
    pub cells: CellsLayout,
}

impl ProfiledCellsLayout {
    /// Row `row`.
    pub fn cell(&self, a: &Aggregates, row: usize) -> Result<ProfiledCell, ResultError> {
        Ok(ProfiledCell {
            keys: (0..self.cells.keys)
                .map(|i| a.cell(row, &format!("k{i}")).cloned())
                .collect::<Result<_, _>>()?,
            rows: a.number(row, "n_rows")?,
            n: a.number_or(row, "n", 0.0)?,
            y_min: a.cell(row, "y_min")?.clone(),
            y_max: a.cell(row, "y_max")?.clone(),
        })
    }
    /// The cells of the complete rows: groups with no NULL key and at least one outcome, read
    /// by [`ProfiledCellsLayout::cells`] (`n` counts the rows with an outcome).
    pub fn complete(&self, a: &Aggregates) -> Result<Aggregates, ResultError> {
        let mut rows = Vec::new();
        for row in 0..a.rows.len() {
            let c = self.cell(a, row)?;
            if c.n > 0.0 && !c.keys.iter().any(|k| matches!(k, Cell::Null)) {
                rows.push(a.rows[row].clone());
            }
        }
        Ok(Aggregates {
            pass: a.pass.clone(),
            names: a.names.clone(),
            rows,
        })
    }
}

/// The layout of a levels pass: one row per column and level.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct LevelsLayout {
    /// How many `by` columns the counts are grouped by.
    pub by: usize,
    /// Whether arm 1's rows are counted.
    pub arm: bool,
}

/// One row of the levels pass: a level of a column, within one combination of the `by` values.
#[derive(Clone, Debug, PartialEq)]
pub struct LevelRow {
    /// The column's index.
    pub which: usize,
    /// The level, as text.
    pub level: String,
    /// The `by` values, as text.
    pub by: Vec<String>,
    /// Rows.
    pub n: f64,
    /// Rows in arm 1 (when counted).
    pub treated: Option<f64>,
}

impl LevelsLayout {
    /// Row `row`.
    pub fn level(&self, a: &Aggregates, row: usize) -> Result<LevelRow, ResultError> {
        let text = |name: &str| -> Result<String, ResultError> {
            Ok(match a.cell(row, name)? {
                Cell::Text(s) => s.clone(),
                Cell::Number(x) => format!("{x}"),
                Cell::Null => "NULL".into(),
            })
        };
        Ok(LevelRow {
            which: a.number(row, "which")? as usize,
            level: text("level")?,
            by: (0..self.by)
                .map(|j| text(&format!("b{j}")))
                .collect::<Result<_, _>>()?,
            n: a.number(row, "n")?,
            treated: if self.arm {
                Some(a.number_or(row, "n1", 0.0)?)
            } else {
                None
            },
        })
    }
}

/// A column to profile.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct ProfileColumn {
    /// Column name.
    pub name: String,
    /// Whether to compute a mean (numeric columns).
    pub numeric: bool,
    /// Whether to count distinct values (approximately where the engine can): hashing every
    /// value is the costliest part of a profile, so only columns whose checks need it ask.
    pub distinct: bool,
    /// Whether to count the values that are neither 0 nor 1 (`c{i}_not01`): the exact, cheap
    /// check of a 0/1 treatment.
    pub zero_one: bool,
}

/// One profiled column, as the profile pass returned it.
#[derive(Clone, Debug, PartialEq)]
pub struct ProfiledColumn {
    /// Non-NULL values.
    pub non_null: f64,
    /// Minimum (NULL when not computed or no values).
    pub min: Cell,
    /// Maximum.
    pub max: Cell,
    /// Mean, where computed.
    pub mean: Option<f64>,
    /// Sum of squares, where computed.
    pub sum_sq: Option<f64>,
    /// Values neither 0 nor 1, where counted (else 0).
    pub not01: f64,
    /// Distinct values, where counted (else 0).
    pub distinct: f64,
}

/// The layout of the profile pass.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct ProfileLayout {
    /// The columns, in the order profiled.
    pub columns: Vec<ProfileColumn>,
}

impl ProfileLayout {
    /// Rows after the filter.
    pub fn rows(&self, a: &Aggregates) -> Result<f64, ResultError> {
        a.number_or(0, "n_rows", 0.0)
    }
    /// Rows with no NULL in any profiled column.
    pub fn complete(&self, a: &Aggregates) -> Result<f64, ResultError> {
        a.number_or(0, "n_complete", 0.0)
    }
    /// Column `i`.
    pub fn column(&self, a: &Aggregates, i: usize) -> Result<ProfiledColumn, ResultError> {
        let c = &self.columns[i];
        let number = |name: String| -> Result<Option<f64>, ResultError> {
            Ok(match a.cell(0, &name)? {
                Cell::Number(x) => Some(*x),
                _ => None,
            })
        };
        Ok(ProfiledColumn {
            non_null: a.number(0, &format!("c{i}_n"))?,
            min: if c.numeric {
                a.cell(0, &format!("c{i}_min"))?.clone()
            } else {
                Cell::Null
            },
            max: if c.numeric {
                a.cell(0, &format!("c{i}_max"))?.clone()
            } else {
                Cell::Null
            },
            mean: if c.numeric {
                number(format!("c{i}_mean"))?
            } else {
                None
            },
            sum_sq: if c.numeric {
                number(format!("c{i}_ss"))?
            } else {
                None
            },
            not01: if c.zero_one {
                a.number_or(0, &format!("c{i}_not01"), 0.0)?
            } else {
                0.0
            },
            distinct: if c.distinct {
                a.number_or(0, &format!("c{i}_distinct"), 0.0)?
            } else {
                0.0
            },
        })
    }
}

/// The layout of the [`nonfinite`](crate::passes::nonfinite) pass.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct NonFiniteLayout {
    /// The columns, in the order counted.
    pub columns: Vec<String>,
}

/// Rows of one column that hold a value other than a finite number within the limit.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct NonFinite {
    /// NaN (not-a-number).
    pub nan: f64,
    /// +infinity.
    pub pos_inf: f64,
    /// -infinity.
    pub neg_inf: f64,
    /// Finite, beyond ± the limit.
    pub beyond: f64,
}

impl NonFiniteLayout {
    /// Column `i`'s counts.
    pub fn column(&self, a: &Aggregates, i: usize) -> Result<NonFinite, ResultError> {
        let n = |what: &str| a.number_or(0, &format!("c{i}_{what}"), 0.0);
        Ok(NonFinite {
            nan: n("nan")?,
            pos_inf: n("pinf")?,
            neg_inf: n("ninf")?,
            beyond: n("big")?,
        })
    }
}

/// How to read the quantile pass ([`crate::passes::quantile_cuts`]).
#[derive(Clone, Debug, PartialEq)]
pub struct CutsLayout {
    /// Bins asked for.
    pub bins: u32,
}

/// What the quantile pass found.
#[derive(Clone, Debug, PartialEq)]
pub struct Cuts {
    /// Rows (0 when none).
    pub rows: f64,
    /// Distinct values.
    pub distinct: f64,
    /// Smallest value.
    pub low: f64,
    /// Largest value.
    pub high: f64,
    /// The `bins - 1` cut points, in order (equal ones repeat).
    pub cuts: Vec<f64>,
    /// The next larger value after the smallest, then after each cut (`None`: no larger one).
    pub after: Vec<Option<f64>>,
}

impl CutsLayout {
    /// The pass's one row; over no rows, zero rows and no cuts.
    pub fn read(&self, a: &Aggregates) -> Result<Cuts, ResultError> {
        let rows = a.number_or(0, "n", 0.0)?;
        if rows == 0.0 {
            return Ok(Cuts {
                rows,
                distinct: 0.0,
                low: f64::NAN,
                high: f64::NAN,
                cuts: vec![],
                after: vec![],
            });
        }
        Ok(Cuts {
            rows,
            distinct: a.number(0, "distinct_values")?,
            low: a.number(0, "lo")?,
            high: a.number(0, "hi")?,
            cuts: (1..self.bins)
                .map(|i| a.number(0, &format!("cut{i}")))
                .collect::<Result<_, _>>()?,
            after: (0..self.bins)
                .map(|i| match a.cell(0, &format!("after{i}"))? {
                    Cell::Null => Ok(None),
                    _ => a.number(0, &format!("after{i}")).map(Some),
                })
                .collect::<Result<_, _>>()?,
        })
    }
}
