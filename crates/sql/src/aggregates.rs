//! The few rows a pass returns, as engines hand them back.

/// One value of a pass result.
#[derive(Clone, Debug, PartialEq)]
pub enum Cell {
    /// SQL NULL.
    Null,
    /// A number (integers and booleans are converted).
    Number(f64),
    /// Text, or any other type rendered as text.
    Text(String),
}

/// A result value that is missing or of the wrong type.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("the {pass} pass returned {found} for `{column}`, expected {expected}")]
pub struct ResultError {
    /// Pass name.
    pub pass: String,
    /// Output column.
    pub column: String,
    /// What was found.
    pub found: String,
    /// What was expected.
    pub expected: &'static str,
}

/// The few rows a pass returns. Invariant: every row has one cell per name.
#[derive(Clone, Debug, PartialEq)]
pub struct Aggregates {
    /// The pass name, for messages.
    pub pass: String,
    /// Output column names.
    pub names: Vec<String>,
    /// Rows.
    pub rows: Vec<Vec<Cell>>,
}

impl Aggregates {
    /// The cell in column `name` of row `row`.
    pub fn cell(&self, row: usize, name: &str) -> Result<&Cell, ResultError> {
        let i = self
            .names
            .iter()
            .position(|n| n == name)
            .ok_or_else(|| ResultError {
                pass: self.pass.clone(),
                column: name.to_string(),
                found: "no such column".into(),
                expected: "a value",
            })?;
        self.rows
            .get(row)
            .and_then(|r| r.get(i))
            .ok_or_else(|| ResultError {
                pass: self.pass.clone(),
                column: name.to_string(),
                found: format!("no row {row}"),
                expected: "a value",
            })
    }

    /// The number in column `name` of row `row`; NULL (an empty group's sum) is an error.
    pub fn number(&self, row: usize, name: &str) -> Result<f64, ResultError> {
        match self.cell(row, name)? {
            Cell::Number(x) => Ok(*x),
            other => Err(ResultError {
                pass: self.pass.clone(),
                column: name.to_string(),
                found: format!("{other:?}"),
                expected: "a number",
            }),
        }
    }

    /// The number in column `name` of row `row`, with NULL read as `default` (an aggregate
    /// over no rows).
    pub fn number_or(&self, row: usize, name: &str, default: f64) -> Result<f64, ResultError> {
        match self.cell(row, name)? {
            Cell::Null => Ok(default),
            _ => self.number(row, name),
        }
    }
}
