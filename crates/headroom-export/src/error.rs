//! Errors of writing a table: [`EncodeError`] (the bytes could not be produced) and
//! [`WriteError`] (the same, or a file-system failure, with the path of the file concerned).
//!
//! Each message is complete on its own (`outputs/nodes.parquet: cannot rename ...: Permission
//! denied`), so these errors report no separate `source()`.

use std::path::PathBuf;

/// The table could not be encoded as Parquet or CSV.
#[derive(Debug, thiserror::Error)]
pub enum EncodeError {
    /// A table without columns cannot be written.
    #[error("the table has no columns")]
    NoColumns,
    /// One text or geometry value is too large for one Arrow batch.
    #[error("column `{column}`, row {row_idx}: value of {n_bytes} bytes is too large to write")]
    ValueTooLarge {
        /// The column.
        column: String,
        /// Zero-based row index.
        row_idx: usize,
        /// Encoded size of the value.
        n_bytes: usize,
    },
    /// Writing the encoded bytes failed.
    #[error("{0}")]
    Io(std::io::Error),
    /// The Parquet encoder failed.
    #[error("Parquet encoding failed: {0}")]
    Parquet(parquet::errors::ParquetError),
    /// Building the Arrow arrays failed.
    #[error("Arrow encoding failed: {0}")]
    Arrow(arrow_schema::ArrowError),
    /// The CSV encoder failed.
    #[error("CSV encoding failed: {0}")]
    Csv(csv::Error),
}

impl From<std::io::Error> for EncodeError {
    fn from(error: std::io::Error) -> EncodeError {
        EncodeError::Io(error)
    }
}

impl From<parquet::errors::ParquetError> for EncodeError {
    fn from(error: parquet::errors::ParquetError) -> EncodeError {
        EncodeError::Parquet(error)
    }
}

impl From<arrow_schema::ArrowError> for EncodeError {
    fn from(error: arrow_schema::ArrowError) -> EncodeError {
        EncodeError::Arrow(error)
    }
}

impl From<csv::Error> for EncodeError {
    fn from(error: csv::Error) -> EncodeError {
        EncodeError::Csv(error)
    }
}

/// Writing a table to a file failed; nothing was left under the final name.
#[derive(Debug, thiserror::Error)]
pub enum WriteError {
    /// The path does not name a file (e.g. it ends in `..`).
    #[error("{}: not a file path", path.display())]
    NotAFilePath {
        /// The path given.
        path: PathBuf,
    },
    /// A file-system operation failed.
    #[error("{}: {action}: {error}", path.display())]
    Io {
        /// The final path of the file being written.
        path: PathBuf,
        /// What was being done, e.g. `cannot create temporary file .nodes.parquet.tmp-12-0`.
        action: String,
        /// The cause.
        error: std::io::Error,
    },
    /// The table could not be encoded.
    #[error("{}: {error}", path.display())]
    Encode {
        /// The final path of the file being written.
        path: PathBuf,
        /// The cause.
        error: EncodeError,
    },
}

impl WriteError {
    /// The final path of the file concerned.
    pub fn path(&self) -> &std::path::Path {
        match self {
            WriteError::NotAFilePath { path }
            | WriteError::Io { path, .. }
            | WriteError::Encode { path, .. } => path,
        }
    }
}
