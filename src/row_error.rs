//! The one shape of a rejected row of an input batch, wherever the batch
//! comes from (gauge readings, an inflow upload, `INFLOW.csv`): its 1-based
//! row number (0 for the batch as a whole), the field at fault and what is
//! wrong with it. The API sends it as it is: `{row, field, message}`.

use serde::Serialize;

/// A bad row: which, which field, and why.
#[derive(Debug, Clone, PartialEq, Serialize, thiserror::Error)]
#[error("row {row}, field `{field}`: {message}")]
pub struct RowError {
    /// 1-based row number; 0 for the batch as a whole.
    pub row: usize,
    pub field: String,
    pub message: String,
}

impl RowError {
    pub fn new(row: usize, field: &str, message: impl Into<String>) -> Self {
        Self {
            row,
            field: field.to_owned(),
            message: message.into(),
        }
    }
}
