//! The kit pass builders are made of: design vectors of centred, scaled terms, cross-fitting
//! folds, per-group models inlined as literals, and aggregate outputs that use a fused
//! moments aggregate where the database has one.
//!
//! Shared pass shapes (`crate::passes`) and each estimator's own passes (in `upshot-methods`)
//! write their SQL with a [`PassText`]: a template of upshot's own text whose placeholders
//! (`__0`, `__src`, `__filter`) become AST nodes when the pass is finished. No user text is
//! ever formatted into SQL: columns bind as quoted identifiers, values as literals.

use crate::dialect::{Dialect, Flavor};
use crate::error::SqlError;
use crate::source::Source;
use crate::template::{self, Bind};
use sqlparser::ast::{Expr, Query};

/// One aggregate query of a plan.
#[derive(Clone, Debug, PartialEq)]
pub struct Pass {
    /// Short name (`profile`, `cells`, `gram`).
    pub name: String,
    /// What it computes, for `upshot plan`.
    pub purpose: String,
    /// The query.
    pub query: Query,
}

impl Pass {
    /// The query as SQL text, laid out on several lines.
    pub fn sql(&self) -> String {
        format!("{:#}", self.query)
    }

    /// Renames the output columns aliased `from` to `to` (a name of the user's: a unit key or
    /// segment column kept under its own name in a table upshot writes), as identifiers quoted
    /// for `dialect`. Aliases in a template are upshot's own; this is how a user's name becomes
    /// one without being formatted into SQL text.
    pub fn rename_outputs(&mut self, renames: &[(String, String)], dialect: &dyn Dialect) {
        if let sqlparser::ast::SetExpr::Select(s) = self.query.body.as_mut() {
            for item in &mut s.projection {
                if let sqlparser::ast::SelectItem::ExprWithAlias { alias, .. } = item {
                    if let Some((_, to)) = renames.iter().find(|(f, _)| *f == alias.value) {
                        *alias = sqlparser::ast::Ident::with_quote(dialect.quote(), to.clone());
                    }
                }
            }
        }
    }
}

/// The SQL text of a pass under construction, with its placeholders' bindings.
pub struct PassText {
    flavor: Flavor,
    binds: Vec<Bind>,
    /// The tables of model coefficients [`predictor`] made (see [`PassText::rows_table`]).
    tables: Vec<ModelTable>,
    /// The query text: upshot's own, reading `FROM __src AS src`, with `__filter` where the
    /// row filter goes and `__N` placeholders.
    pub sql: String,
}

impl PassText {
    /// An empty text for `flavor`.
    pub fn new(flavor: &Flavor) -> Self {
        PassText {
            flavor: flavor.clone(),
            binds: Vec::new(),
            tables: Vec::new(),
            sql: String::new(),
        }
    }
    /// The flavor the pass is built for.
    pub fn flavor(&self) -> &Flavor {
        &self.flavor
    }
    /// Appends a placeholder for `b` and returns its text.
    pub(crate) fn bind(&mut self, b: Bind) -> String {
        self.binds.push(b);
        format!("__{}", self.binds.len() - 1)
    }
    /// A placeholder for the column `name` (rendered as a quoted identifier).
    pub fn column(&mut self, name: &str) -> String {
        self.bind(Bind::Column(name.to_string()))
    }
    /// A placeholder for the number `x` (rendered as a literal); `what` names it in errors.
    pub fn number(&mut self, x: f64, what: &str) -> Result<String, SqlError> {
        template::number(x, what)?;
        Ok(self.bind(Bind::Number(x)))
    }
    /// The design rows `rows` (see [`Design::rows`]) as a derived table named `alias`, with
    /// the tables of coefficients of the models [`predictor`] chose rows' models from joined
    /// to it: the predictors must be written before this, and read in the query directly
    /// above it (or above that, as columns a `SELECT *` carries up).
    pub fn rows_table(&self, rows: &str, alias: &str) -> String {
        let joins: Vec<String> = self.tables.iter().map(ModelTable::join).collect();
        format!("({rows}) AS {alias}{}", joins.concat())
    }
    /// The float type of the flavor's dialect.
    pub fn float(&self) -> &'static str {
        self.flavor.dialect.float_type()
    }
    /// Whether column `name` is read through an integer: a boolean column, in a dialect that
    /// cannot cast a boolean to a float.
    pub fn boolean_via_integer(&self, name: &str) -> bool {
        !self.flavor.dialect.casts_boolean_to_float()
            && self.flavor.booleans.iter().any(|b| b == name)
    }
    /// The placeholder `p` of column `name` cast to the float type.
    pub fn float_of(&self, p: &str, name: &str) -> String {
        let f = self.float();
        if self.boolean_via_integer(name) {
            format!("CAST(CAST({p} AS INTEGER) AS {f})")
        } else {
            format!("CAST({p} AS {f})")
        }
    }
    /// Column `name` cast to the float type.
    pub fn float_column(&mut self, name: &str) -> String {
        let p = self.column(name);
        self.float_of(&p, name)
    }
    /// `SELECT keys, outputs FROM from [GROUP BY keys ORDER BY keys]` for a design of `k`
    /// terms (see [`Out`]).
    pub fn aggregate(&self, k: usize, keys: &[String], outs: &[Out], from: &str) -> String {
        aggregate(&self.flavor, k, keys, outs, from)
    }
    /// The query with every placeholder replaced and the source in place.
    pub(crate) fn query(
        &self,
        source: &Source,
        filter: Option<&Expr>,
    ) -> Result<sqlparser::ast::Query, SqlError> {
        let q = template::query(self.flavor.dialect, &self.sql, &self.binds, source, filter)?;
        let d = self.flavor.dialect;
        if let (Some(max), sqlparser::ast::SetExpr::Select(s)) = (d.max_result_columns(), &*q.body)
        {
            if s.projection.len() > max {
                return Err(SqlError::TooWide {
                    columns: s.projection.len(),
                    dialect: d.name(),
                    max,
                });
            }
        }
        Ok(q)
    }
    /// The finished pass named `name`.
    pub fn finish(
        self,
        name: &str,
        purpose: String,
        source: &Source,
        filter: Option<&Expr>,
    ) -> Result<Pass, SqlError> {
        Ok(Pass {
            name: name.to_string(),
            purpose,
            query: self.query(source, filter)?,
        })
    }
}

/// One entry of a design vector, centred and scaled before products are summed.
#[derive(Clone, Debug, PartialEq)]
pub enum DesignTerm {
    /// `(x - centre) / scale` for a numeric column.
    Numeric {
        /// Column.
        column: String,
        /// Centre (the profile mean).
        centre: f64,
        /// Scale (positive).
        scale: f64,
    },
    /// `(1[x ∈ levels] - centre) / scale`: one-hot for one level of a categorical column, or
    /// for a pool of its rare levels.
    Level {
        /// Column.
        column: String,
        /// The level (or the pooled levels), compared as string literals.
        levels: Vec<String>,
        /// Centre (the level's share).
        centre: f64,
        /// Scale (positive).
        scale: f64,
    },
    /// `(Π factors - centre) / scale`: a product of centred, scaled terms (squares,
    /// interactions of a basis expansion).
    Product {
        /// The factors, each centred and scaled itself.
        factors: Vec<DesignTerm>,
        /// Centre.
        centre: f64,
        /// Scale (positive).
        scale: f64,
    },
}

impl DesignTerm {
    /// The column the term reads (the first factor's, for a product).
    pub fn column(&self) -> &str {
        match self {
            DesignTerm::Numeric { column, .. } | DesignTerm::Level { column, .. } => column,
            DesignTerm::Product { factors, .. } => factors.first().map_or("", |f| f.column()),
        }
    }

    /// Its centre and scale.
    pub fn centre_scale(&self) -> (f64, f64) {
        match self {
            DesignTerm::Numeric { centre, scale, .. }
            | DesignTerm::Level { centre, scale, .. }
            | DesignTerm::Product { centre, scale, .. } => (*centre, *scale),
        }
    }
}

/// The factor `v_{i-1}` of the design `(1, v...)` at index `i`, as ` * v{i-1}` (empty for the
/// intercept).
pub fn factor(i: usize) -> String {
    if i == 0 {
        String::new()
    } else {
        format!(" * v{}", i - 1)
    }
}

/// `__filter AND c IS NOT NULL ...` for `columns`: the row filter of a pass.
pub fn not_null(t: &mut PassText, columns: &[String]) -> String {
    let mut w = String::from("__filter");
    for c in columns {
        let p = t.bind(Bind::Column(c.clone()));
        w.push_str(&format!(" AND {p} IS NOT NULL"));
    }
    w
}

/// The modulus of the fold hash: the Mersenne prime 2³¹ − 1, so every product below stays
/// under 2⁶² and fits a signed 64-bit integer in any SQL engine.
pub const FOLD_PRIME: i64 = 2_147_483_647;

/// The fold of an integer unit key, exactly as the SQL of [`Fold`] computes it: a non-linear
/// arithmetic hash (multiply, square, multiply-add, all modulo 2³¹ − 1), then modulo `folds`.
/// Portable: only `%`, `*` and `+` on 64-bit integers, after one `%` in the key's own type
/// (so 128-bit and unsigned keys hash too); `%` truncates toward zero, as in SQL.
pub fn fold_of(key: i128, folds: u32) -> u32 {
    let p = FOLD_PRIME;
    let r = (key % i128::from(p)) as i64;
    let a = (r + p) % p;
    let h1 = (a * 48_271 + 11) % p;
    let h2 = (h1 * h1) % p;
    let h3 = (h2 * 16_807 + h1) % p;
    (h3 % i64::from(folds)) as u32
}

/// Cross-fitting folds from a hash of an integer unit key.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Fold {
    /// The unit key column (integer).
    pub unit: String,
    /// Number of folds (≥ 1).
    pub folds: u32,
}

/// A group key of a design pass.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Key {
    /// A column's value.
    Column(String),
    /// The row's fold (the design must have a [`Fold`]).
    Fold,
}

/// A design: group keys (`k0`, `k1`, ... in the pass), centred and scaled terms (`v0`, ...),
/// extra float columns under aliases of ours (`t`, `y`), and an optional fold (`f`).
#[derive(Clone, Debug, PartialEq)]
pub struct Design {
    /// Group keys.
    pub keys: Vec<Key>,
    /// Terms.
    pub terms: Vec<DesignTerm>,
    /// `(alias, column)`: the column cast to a float under the alias.
    pub extras: Vec<(&'static str, String)>,
    /// Cross-fitting folds.
    pub fold: Option<Fold>,
}

/// A group key value, as a pass returned it.
#[derive(Clone, Debug, PartialEq)]
pub enum KeyValue {
    /// A number.
    Number(f64),
    /// Text.
    Text(String),
}

impl std::fmt::Display for KeyValue {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            KeyValue::Number(x) if x.fract() == 0.0 && x.abs() < 1e15 => write!(f, "{}", *x as i64),
            KeyValue::Number(x) => write!(f, "{x}"),
            KeyValue::Text(s) => f.write_str(s),
        }
    }
}

/// What selects a model for a row: group key values and, optionally, the row's fold.
#[derive(Clone, Debug, PartialEq)]
pub struct Selector {
    /// Indices into the design's keys whose values a model is chosen by.
    pub keys: Vec<usize>,
    /// Whether the row's fold also chooses the model (its last key value is then the fold).
    pub fold: bool,
}

impl Selector {
    /// No selection: one model for all rows.
    pub fn single() -> Selector {
        Selector {
            keys: vec![],
            fold: false,
        }
    }
}

/// One fitted linear model: the selector values it applies to and its coefficients on the
/// design `(1, v0, v1, ...)` (intercept first).
#[derive(Clone, Debug, PartialEq)]
pub struct Model {
    /// Values of the selector's keys (then the fold, if the selector uses it).
    pub key: Vec<KeyValue>,
    /// Coefficients, intercept first.
    pub coef: Vec<f64>,
}

/// A family of models and how rows choose among them.
#[derive(Clone, Debug, PartialEq)]
pub struct Models {
    /// How a row picks its model.
    pub selector: Selector,
    /// The models.
    pub models: Vec<Model>,
}

impl Models {
    /// One model for every row.
    pub fn single(coef: Vec<f64>) -> Models {
        Models {
            selector: Selector::single(),
            models: vec![Model { key: vec![], coef }],
        }
    }
}

/// The SQL expression of one term, centred and scaled, reading the source's columns.
pub fn term_sql(t: &mut PassText, term: &DesignTerm) -> Result<String, SqlError> {
    let text = t.flavor.dialect.text_type();
    let (centre, scale) = term.centre_scale();
    if !(scale.is_finite() && scale > 0.0) {
        return Err(SqlError::BadScale {
            column: term.column().to_string(),
            scale,
        });
    }
    template::number(centre, &format!("the centre of `{}`", term.column()))?;
    let raw = match term {
        DesignTerm::Numeric { column, .. } => t.float_column(column),
        DesignTerm::Level { column, levels, .. } => {
            let c = t.bind(Bind::Column(column.clone()));
            let l: Vec<String> = levels
                .iter()
                .map(|l| t.bind(Bind::Text(l.clone())))
                .collect();
            if let [one] = l.as_slice() {
                format!("CASE WHEN CAST({c} AS {text}) = {one} THEN 1.0 ELSE 0.0 END")
            } else {
                format!(
                    "CASE WHEN CAST({c} AS {text}) IN ({}) THEN 1.0 ELSE 0.0 END",
                    l.join(", ")
                )
            }
        }
        DesignTerm::Product { factors, .. } => {
            let parts = factors
                .iter()
                .map(|x| term_sql(t, x).map(|s| format!("({s})")))
                .collect::<Result<Vec<_>, _>>()?;
            parts.join(" * ")
        }
    };
    let m = t.bind(Bind::Number(centre));
    let s = t.bind(Bind::Number(scale));
    Ok(format!("({raw} - {m}) / {s}"))
}

/// The fold expression of an integer unit key (see [`fold_of`]).
fn fold_sql(t: &mut PassText, fold: &Fold) -> String {
    let u = t.bind(Bind::Column(fold.unit.clone()));
    let p = FOLD_PRIME;
    let a = format!("(CAST({u} % {p} AS BIGINT) + {p}) % {p}");
    let h1 = format!("(({a}) * 48271 + 11) % {p}");
    let h2 = format!("(({h1}) * ({h1})) % {p}");
    let h3 = format!("(({h2}) * 16807 + ({h1})) % {p}");
    format!("({h3}) % {}", fold.folds)
}

impl Design {
    /// A design grouped by `groups` (columns) over `terms`, with `extras` as `(alias, column)`
    /// and no folds.
    pub fn grouped(
        groups: &[String],
        terms: &[DesignTerm],
        extras: &[(&'static str, &str)],
    ) -> Design {
        Design {
            keys: groups.iter().map(|g| Key::Column(g.clone())).collect(),
            terms: terms.to_vec(),
            extras: extras.iter().map(|(a, c)| (*a, c.to_string())).collect(),
            fold: None,
        }
    }

    fn columns(&self) -> Vec<String> {
        let mut used: Vec<String> = Vec::new();
        let mut add = |c: &str| {
            if !used.iter().any(|u| u == c) {
                used.push(c.to_string());
            }
        };
        for k in &self.keys {
            if let Key::Column(c) = k {
                add(c);
            }
        }
        fn walk(term: &DesignTerm, add: &mut dyn FnMut(&str)) {
            match term {
                DesignTerm::Product { factors, .. } => factors.iter().for_each(|f| walk(f, add)),
                other => add(other.column()),
            }
        }
        for term in &self.terms {
            walk(term, &mut add);
        }
        for (_, c) in &self.extras {
            add(c);
        }
        if let Some(f) = &self.fold {
            add(&f.unit);
        }
        used
    }

    /// The derived table of design rows; NULLs in any used column excluded.
    pub fn rows(&self, t: &mut PassText) -> Result<String, SqlError> {
        let mut items = Vec::new();
        for (i, k) in self.keys.iter().enumerate() {
            match k {
                Key::Column(c) => {
                    let p = t.bind(Bind::Column(c.clone()));
                    items.push(format!("{p} AS k{i}"));
                }
                Key::Fold => {
                    let fold = self
                        .fold
                        .as_ref()
                        .expect("a fold key needs the design's fold");
                    items.push(format!("{} AS k{i}", fold_sql(t, fold)));
                }
            }
        }
        if let Some(fold) = &self.fold {
            items.push(format!("{} AS f", fold_sql(t, fold)));
        }
        for (i, term) in self.terms.iter().enumerate() {
            items.push(format!("{} AS v{i}", term_sql(t, term)?));
        }
        for (alias, c) in &self.extras {
            items.push(format!("{} AS {alias}", t.float_column(c)));
        }
        if items.is_empty() {
            items.push("1 AS one".into());
        }
        let w = not_null(t, &self.columns());
        Ok(format!(
            "SELECT {} FROM __src AS src WHERE {w}",
            items.join(", ")
        ))
    }

    /// The group keys' output names `k0`, `k1`, ...
    pub fn key_names(&self) -> Vec<String> {
        (0..self.keys.len()).map(|i| format!("k{i}")).collect()
    }

    /// ` per (key, ...)` for a pass's purpose (empty without keys).
    pub fn per(&self) -> String {
        if self.keys.is_empty() {
            return String::new();
        }
        let names: Vec<String> = self
            .keys
            .iter()
            .map(|k| match k {
                Key::Column(c) => c.clone(),
                Key::Fold => "fold".into(),
            })
            .collect();
        format!(" per ({})", names.join(", "))
    }
}

fn linear(t: &mut PassText, coef: &[f64], terms: usize) -> Result<String, SqlError> {
    assert_eq!(
        coef.len(),
        terms + 1,
        "one coefficient per term plus the intercept"
    );
    for (i, c) in coef.iter().enumerate() {
        template::number(*c, &format!("coefficient {i}"))?;
    }
    let first = t.bind(Bind::Number(coef[0]));
    if let Some(function) = t.flavor.functions.linear.filter(|_| terms > 0) {
        // One call with the coefficients as one list, summed in the plain form's order.
        let mut cs = vec![first];
        for c in &coef[1..] {
            cs.push(t.bind(Bind::Number(*c)));
        }
        let vs: Vec<String> = (0..terms).map(|i| format!("v{i}")).collect();
        return Ok(format!(
            "{function}([{}], {})",
            cs.join(", "),
            vs.join(", ")
        ));
    }
    let mut out = first;
    for (i, c) in coef[1..].iter().enumerate() {
        let b = t.bind(Bind::Number(*c));
        out.push_str(&format!(" + {b} * v{i}"));
    }
    Ok(out)
}

fn key_literal(t: &mut PassText, v: &KeyValue) -> Result<String, SqlError> {
    Ok(match v {
        // Whole numbers (integer key columns, folds) as integer literals: DuckDB compares an
        // integer column with `1.0` by casting every row to DECIMAL, which made the model
        // selection of a segmented pass 2.7× slower (1M rows, 10 segments × 5 folds).
        KeyValue::Number(x) if x.fract() == 0.0 && x.abs() < 9.0e15 => {
            t.bind(Bind::Integer(*x as i64))
        }
        KeyValue::Number(x) => {
            template::number(*x, "a group key")?;
            t.bind(Bind::Number(*x))
        }
        KeyValue::Text(s) => t.bind(Bind::Text(s.clone())),
    })
}

/// The linear predictor of each row's model, as `CASE` expressions nested by selector key:
/// `CASE WHEN k0 = .. THEN CASE WHEN f = .. THEN c0 + c1 * v0 ... END ... END`, or the plain
/// predictor when there is one unselected model. Nesting matters with many models (segments ×
/// folds): a row meets one comparison per value of each key instead of one per model (measured
/// on 1M rows with 10 segments × 5 folds: 0.069 s against 0.119 s for one flat `CASE`).
pub fn predictor(t: &mut PassText, models: &Models, terms: usize) -> Result<String, SqlError> {
    let sel = &models.selector;
    if sel.keys.is_empty() && !sel.fold {
        let m = models.models.first().expect("at least one model");
        return linear(t, &m.coef, terms);
    }
    let mut columns: Vec<String> = sel.keys.iter().map(|k| format!("k{k}")).collect();
    if sel.fold {
        columns.push("f".into());
    }
    let all: Vec<&Model> = models.models.iter().collect();
    if t.flavor.dialect.joins_models() && all.len() > JOINED_MODELS {
        return joined(t, &all, &columns, terms);
    }
    nested(t, &all, &columns, 0, terms)
}

/// Above how many models a family is joined as a table where the dialect joins models
/// ([`Dialect::joins_models`]). Measured in upshot's DuckDB on 1M rows with 10 segments
/// (doubly-robust, cross-fitted, `upshot-bench --measure`): the score pass's three families
/// of 50 models (segment × fold) took 0.43 s as nested `CASE` and 0.26 s joined, but the fold
/// fits' score pass, five families of 10 models (by segment), took 0.30 s as `CASE` and 0.33 s
/// joined, and the Newton passes' one family of 10, 0.16 s against 0.17 s.
pub const JOINED_MODELS: usize = 16;

/// A table of model coefficients joined to the design rows on the selector columns: one row
/// per key, `(key…, then each predictor's coefficients)`, the predictors of a pass that
/// choose by the same keys sharing it (one join, not one per predictor).
struct ModelTable {
    /// Its alias, `mt{n}_`, which also prefixes its columns.
    name: String,
    /// The selector columns of the design rows (`k0`, …, `f`).
    columns: Vec<String>,
    /// The keys, in order.
    keys: Vec<Vec<KeyValue>>,
    /// Per key, its literals and then each predictor's coefficients (cast to the float type).
    items: Vec<Vec<String>>,
    /// The column names after the keys.
    coefficients: Vec<String>,
}

impl ModelTable {
    fn join(&self) -> String {
        let rows: Vec<String> = self
            .items
            .iter()
            .map(|r| format!("({})", r.join(", ")))
            .collect();
        let mut names: Vec<String> = (0..self.columns.len())
            .map(|i| format!("{}j{i}", self.name))
            .collect();
        names.extend(self.coefficients.iter().cloned());
        let on: Vec<String> = self
            .columns
            .iter()
            .enumerate()
            .map(|(i, c)| format!("{c} = {}j{i}", self.name))
            .collect();
        format!(
            " LEFT JOIN (VALUES {}) AS {}({}) ON {}",
            rows.join(", "),
            self.name,
            names.join(", "),
            on.join(" AND ")
        )
    }
}

/// The linear predictor of each row's model read from a joined table of the models'
/// coefficients ([`ModelTable`]), left joined on the selector keys: a row whose key has no
/// model gets NULL, as from a `CASE` without a match. The first model of a key is the one
/// used, as in [`nested`]; later ones are left out, so a row meets one model. Coefficients are
/// cast to the float type (a decimal literal would make a DECIMAL column).
fn joined(
    t: &mut PassText,
    models: &[&Model],
    columns: &[String],
    terms: usize,
) -> Result<String, SqlError> {
    let mut keys: Vec<Vec<KeyValue>> = Vec::new();
    let mut coefs: Vec<&[f64]> = Vec::new();
    for m in models {
        if keys.contains(&m.key) {
            continue;
        }
        assert_eq!(
            m.coef.len(),
            terms + 1,
            "one coefficient per term plus the intercept"
        );
        keys.push(m.key.clone());
        coefs.push(&m.coef);
    }
    let f = t.float();
    let at = match t
        .tables
        .iter()
        .position(|x| x.columns == columns && x.keys == keys)
    {
        Some(at) => at,
        None => {
            let name = format!("mt{}_", t.tables.len());
            let mut items = Vec::new();
            for k in &keys {
                let mut row = Vec::new();
                for v in k {
                    row.push(key_literal(t, v)?);
                }
                items.push(row);
            }
            t.tables.push(ModelTable {
                name,
                columns: columns.to_vec(),
                keys,
                items,
                coefficients: vec![],
            });
            t.tables.len() - 1
        }
    };
    let p = t.tables[at].coefficients.len() / (terms + 1);
    let name = t.tables[at].name.clone();
    let mut cells = Vec::new();
    for c in &coefs {
        let mut row = Vec::new();
        for (i, x) in c.iter().enumerate() {
            let x = t.number(*x, &format!("coefficient {i}"))?;
            row.push(format!("CAST({x} AS {f})"));
        }
        cells.push(row);
    }
    let table = &mut t.tables[at];
    for (row, more) in table.items.iter_mut().zip(cells) {
        row.extend(more);
    }
    let cols: Vec<String> = (0..=terms).map(|i| format!("{name}p{p}c{i}")).collect();
    let mut out = cols[0].clone();
    for i in 0..terms {
        out.push_str(&format!(" + {} * v{i}", cols[i + 1]));
    }
    table.coefficients.extend(cols);
    Ok(out)
}

/// The `CASE` over key position `pos` of `models` (which agree on the earlier positions).
fn nested(
    t: &mut PassText,
    models: &[&Model],
    columns: &[String],
    pos: usize,
    terms: usize,
) -> Result<String, SqlError> {
    if pos == columns.len() {
        let m = models.first().expect("a model per key");
        return linear(t, &m.coef, terms);
    }
    // Values of this key in first-seen order, each with its models.
    let mut groups: Vec<(&KeyValue, Vec<&Model>)> = Vec::new();
    for m in models {
        let v = &m.key[pos];
        match groups.iter_mut().find(|(g, _)| *g == v) {
            Some((_, list)) => list.push(m),
            None => groups.push((v, vec![m])),
        }
    }
    let mut out = String::from("CASE");
    for (v, list) in groups {
        let lit = key_literal(t, v)?;
        let inner = nested(t, &list, columns, pos + 1, terms)?;
        out.push_str(&format!(" WHEN {} = {lit} THEN {inner}", columns[pos]));
    }
    out.push_str(" END");
    Ok(out)
}

/// One output of an aggregate pass.
pub enum Out {
    /// `expr AS alias`, as written.
    Plain {
        /// The aggregate expression.
        expr: String,
        /// Its output name.
        alias: String,
    },
    /// Sums `Σ weight · z_i z_j` over `z = (1, v0, ..., v{k-1})`: one fused aggregate call where
    /// the dialect has one, else one `SUM` per entry.
    Products(Products),
    /// Sums `Σ f · z_i` of each row expression `f` with each entry of `z = (1, v0, ...)`,
    /// aliased `{prefix}{i}`: where the flavor has the fused aggregate, the cross block of one
    /// call over `(z, f...)` (its other products are computed and not read: measured faster
    /// than a `SUM` per entry, 0.10 s against 0.14 s for eight expressions × nine entries on
    /// 1M rows), else one `SUM` per entry.
    Cross(Vec<(String, String)>),
}

/// A block of weighted sums of products of the design vector `z = (1, v...)`.
pub struct Products {
    /// The row weight.
    pub(crate) weight: String,
    /// Per output: alias, the summand written out (for plain `SUM`s), and `(i, j)`, `i ≤ j`,
    /// indices into `z`.
    pub(crate) entries: Vec<(String, String, usize, usize)>,
    /// The design terms `z` spans (`v0 .. v{terms-1}`): all of the design's, or its first ones
    /// when a pass sums products of a shorter vector too.
    pub(crate) terms: usize,
}

impl Out {
    /// `expr AS alias`.
    pub fn plain(expr: impl Into<String>, alias: impl Into<String>) -> Out {
        Out::Plain {
            expr: expr.into(),
            alias: alias.into(),
        }
    }
}

/// `SELECT keys, outputs FROM from [GROUP BY keys ORDER BY keys]` for a design of `k` terms.
/// With a fused moments aggregate, each [`Out::Products`] block becomes one call in an inner
/// aggregate query, whose list the outer query unpacks into the same named columns.
fn aggregate(f: &Flavor, k: usize, keys: &[String], outs: &[Out], from: &str) -> String {
    let fused = f.functions.moments.filter(|(_, max)| k >= 1 && k <= *max);
    let grouped = if keys.is_empty() {
        String::new()
    } else {
        format!(" GROUP BY {}", keys.join(", "))
    };
    let ordered = if keys.is_empty() {
        String::new()
    } else {
        format!(" ORDER BY {}", keys.join(", "))
    };
    let crossed = outs
        .iter()
        .map(|o| match o {
            Out::Cross(c) => c.len(),
            _ => 0,
        })
        .max()
        .unwrap_or(0);
    let Some((function, _)) = fused.filter(|(_, max)| k + crossed <= *max).filter(|_| {
        outs.iter()
            .any(|o| matches!(o, Out::Products(_) | Out::Cross(_)))
    }) else {
        let mut items: Vec<String> = keys.to_vec();
        for o in outs {
            match o {
                Out::Plain { expr, alias } => items.push(format!("{expr} AS {alias}")),
                Out::Products(p) => {
                    for (alias, summand, _, _) in &p.entries {
                        items.push(format!("SUM({summand}) AS {alias}"));
                    }
                }
                Out::Cross(c) => {
                    for i in 0..=k {
                        for (prefix, f) in c {
                            items.push(format!("SUM({f}{}) AS {prefix}{i}", factor(i)));
                        }
                    }
                }
            }
        }
        return format!("SELECT {} FROM {from}{grouped}{ordered}", items.join(", "));
    };
    let width = k + 1;
    let vs: Vec<String> = (0..k).map(|i| format!("v{i}")).collect();
    let mut inner: Vec<String> = keys.to_vec();
    let mut outer: Vec<String> = keys.to_vec();
    let mut block = 0;
    for o in outs {
        match o {
            Out::Plain { expr, alias } => {
                inner.push(format!("{expr} AS {alias}"));
                outer.push(alias.clone());
            }
            Out::Products(p) if p.terms == 0 => {
                // A block over the intercept alone (a shorter vector of no terms): one sum.
                for (alias, summand, _, _) in &p.entries {
                    inner.push(format!("SUM({summand}) AS {alias}"));
                    outer.push(alias.clone());
                }
            }
            Out::Products(p) => {
                inner.push(format!(
                    "{function}({}, {}) AS moments{block}",
                    p.weight,
                    vs[..p.terms].join(", ")
                ));
                for (alias, _, i, j) in &p.entries {
                    let at = upper_at(*i, *j, p.terms + 1);
                    outer.push(format!(
                        "{} AS {alias}",
                        f.dialect.list_element(&format!("moments{block}"), at)
                    ));
                }
                block += 1;
            }
            Out::Cross(c) => {
                let fs: Vec<&str> = c.iter().map(|(_, f)| f.as_str()).collect();
                inner.push(format!(
                    "{function}(1.0, {}) AS moments{block}",
                    vs.iter()
                        .map(String::as_str)
                        .chain(fs)
                        .collect::<Vec<_>>()
                        .join(", ")
                ));
                let w = width + c.len();
                for i in 0..=k {
                    for (m, (prefix, _)) in c.iter().enumerate() {
                        let at = upper_at(i, width + m, w);
                        outer.push(format!(
                            "{} AS {prefix}{i}",
                            f.dialect.list_element(&format!("moments{block}"), at)
                        ));
                    }
                }
                block += 1;
            }
        }
    }
    format!(
        "SELECT {} FROM (SELECT {} FROM {from}{grouped}) AS sums_{ordered}",
        outer.join(", "),
        inner.join(", ")
    )
}

/// The 1-based position of entry `(i, j)`, `i ≤ j`, in the row-major upper triangle of a
/// `width × width` matrix: where the fused aggregate's list holds it.
fn upper_at(i: usize, j: usize, width: usize) -> usize {
    i * (2 * width - i + 1) / 2 + (j - i) + 1
}

/// `Σ weight · w_i w_j` (`i ≤ j`) over `w = (1, v...)`, aliased `{prefix}{i}_{j}`, with the
/// plain summand `{weight}{factor(i)}{factor(j)}`.
pub fn products_of(weight: &str, prefix: &str, k: usize) -> Products {
    let mut entries = Vec::new();
    for i in 0..=k {
        for j in i..=k {
            entries.push((
                format!("{prefix}{i}_{j}"),
                format!("{weight}{}{}", factor(i), factor(j)),
                i,
                j,
            ));
        }
    }
    Products {
        weight: weight.to_string(),
        entries,
        terms: k,
    }
}

/// The overflow-free logistic function of `eta`.
pub const SIGMOID: &str =
    "CASE WHEN eta >= 0 THEN 1.0 / (1.0 + EXP(-eta)) ELSE EXP(eta) / (1.0 + EXP(eta)) END";

/// The propensity columns of a pass: the linear predictor `eta`, `e_raw` (fitted), `e`
/// (clipped to `[clip, 1 - clip]`) and `inside` (1 where no clipping happened), each computed
/// once per row in its own layer (the logistic function once, not once per use: the weighting
/// pass on 1M rows took 0.137 s against 0.167 s with it written out at each use).
pub struct PropensityColumns {
    eta: String,
    clipped: String,
}

impl PropensityColumns {
    /// The relation `rows` (from [`PassText::rows_table`]) with the propensity columns added,
    /// and the items `more` beside `e`, as a derived table named `alias`.
    pub fn over(&self, rows: &str, more: &str, alias: &str) -> String {
        format!(
            "(SELECT *, {}{more} FROM (SELECT *, {SIGMOID} AS e_raw FROM (SELECT *, {} AS eta FROM {rows}) AS linear_) AS raw_) AS {alias}",
            self.clipped, self.eta
        )
    }
}

/// The propensity columns of `models` (see [`PropensityColumns`]).
pub fn propensity_columns(
    t: &mut PassText,
    models: &Models,
    terms: usize,
    clip: f64,
) -> Result<PropensityColumns, SqlError> {
    let eta = predictor(t, models, terms)?;
    template::number(clip, "the propensity clip")?;
    let lo = t.bind(Bind::Number(clip));
    let hi = t.bind(Bind::Number(1.0 - clip));
    let lo2 = t.bind(Bind::Number(clip));
    let hi2 = t.bind(Bind::Number(1.0 - clip));
    Ok(PropensityColumns {
        eta,
        clipped: format!(
            "CASE WHEN e_raw < {lo} THEN {lo2} WHEN e_raw > {hi} THEN {hi2} ELSE e_raw END AS e, CASE WHEN e_raw < {lo} OR e_raw > {hi} THEN 0.0 ELSE 1.0 END AS inside"
        ),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn folds_are_balanced_and_stable() {
        let mut count = [0u32; 5];
        for id in 100_001..120_001 {
            count[fold_of(id, 5) as usize] += 1;
        }
        for c in count {
            assert!((3800..4200).contains(&c), "{count:?}");
        }
        assert_eq!(fold_of(-7, 5), fold_of(i128::from(FOLD_PRIME - 7), 5));
        assert_eq!(fold_of(12345, 1), 0);
    }

    /// A block of products over fewer terms than the design (a Newton block beside a Gram block
    /// that adds the outcome) calls the fused aggregate on its own terms and reads its own
    /// triangle; a block over no terms is written as plain sums.
    #[test]
    fn products_blocks_span_their_own_terms() {
        let f = Flavor::duckdb();
        let outs = [
            Out::Products(products_of("w", "h", 1)),
            Out::Products(products_of("q", "z", 0)),
            Out::Products(products_of("1.0", "g", 2)),
        ];
        let sql = aggregate(&f, 2, &[], &outs, "rows_");
        assert!(sql.contains("upshot_moments(w, v0) AS moments0"), "{sql}");
        assert!(sql.contains("SUM(q) AS z0_0"), "{sql}");
        assert!(
            sql.contains("upshot_moments(1.0, v0, v1) AS moments1"),
            "{sql}"
        );
        // h1_1 is the third entry of a 2 × 2 triangle; g2_2 the sixth of a 3 × 3 one.
        assert!(sql.contains("list_extract(moments0, 3) AS h1_1"), "{sql}");
        assert!(sql.contains("list_extract(moments1, 6) AS g2_2"), "{sql}");
    }
}
