//! The error type of the edges (files, tables, configuration). Messages name the place (file,
//! 1-based row, column), the value found and what was expected, so a user can fix the input.
//! The numerical core has its own small error enums; this one is for everything that stops a
//! command with exit code 2.

use std::path::PathBuf;

/// A problem that stops a command.
#[derive(Debug, thiserror::Error)]
pub enum Error {
    #[error("{path}: file or folder not found")]
    NotFound { path: PathBuf },
    #[error("{path}: no .csv or .parquet files in this folder")]
    EmptyFolder { path: PathBuf },
    #[error("{path}: the file type is not understood (expected .csv or .parquet)")]
    UnknownFormat { path: PathBuf },
    #[error("{path}: table `{table}` needs column `{column}`, which is missing; columns found: {found}")]
    MissingColumn { path: PathBuf, table: &'static str, column: String, found: String },
    #[error("{path}: column `{column}` of table `{table}` has type {found}, expected {expected}")]
    ColumnType { path: PathBuf, table: &'static str, column: String, found: String, expected: &'static str },
    #[error("{path}: could not be read as {format}: {message}")]
    Read { path: PathBuf, format: &'static str, message: String },
    #[error("{path}: could not be written: {message}")]
    Write { path: PathBuf, message: String },
    #[error("{path}: {message}")]
    Config { path: PathBuf, message: String },
    #[error("invalid argument {name}: {message}")]
    Argument { name: &'static str, message: String },
    /// A command-line value clap cannot check (a range, a combination of flags).
    #[error("{0}")]
    Usage(String),
    /// Parts of a run that cannot be merged into one.
    #[error("{0}")]
    Parts(String),
    /// A stage of the run failed; the core's typed error is kept as the source.
    #[error("{stage} stage: {source}")]
    Stage {
        stage: &'static str,
        #[source]
        source: StageError,
    },
    /// Rows in differ from rows used + rejected: the accounting invariant broke.
    #[error("row accounting of {table} does not add up{after}: {rows_in} in, {used} used, {rejected} rejected; this is a bug, please report it")]
    Accounting { table: String, after: &'static str, rows_in: usize, used: usize, rejected: usize },
    /// A figure could not be drawn.
    #[error("drawing a figure: {0}")]
    Chart(String),
    /// A table or document could not be encoded.
    #[error("{what}: {message}")]
    Encode { what: &'static str, message: String },
    /// An expectation of the code itself broke.
    #[error("{0}; this is a bug, please report it")]
    Internal(String),
}

/// The core's typed errors a stage can end with.
#[derive(Debug, thiserror::Error)]
pub enum StageError {
    #[error(transparent)]
    Backtest(#[from] crate::backtest::BacktestError),
    #[error(transparent)]
    Stability(#[from] crate::stability::StabilityError),
    #[error(transparent)]
    Statistics(#[from] crate::stats::StatsError),
}

impl Error {
    /// The process exit code for this error: 2 for bad input or configuration.
    pub fn exit_code(&self) -> u8 {
        2
    }
}

pub type Result<T> = std::result::Result<T, Error>;
