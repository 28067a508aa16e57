//! Why a run folder could not be read.

use std::path::PathBuf;

/// A run folder that cannot be turned into a report. Every message names the folder or file,
/// and for bad values the row, the column and the value.
#[derive(Debug, thiserror::Error)]
pub enum ReportError {
    /// The run folder does not exist or is not a folder.
    #[error("{}: no such folder (give the --out folder of `headroom map`)", .0.display())]
    NoRunDir(PathBuf),
    /// No `nodes*.parquet` anywhere under the run folder.
    #[error(
        "{}: no nodes*.parquet file in this folder or below (give the --out folder of `headroom map`)",
        .0.display()
    )]
    NoNodeFiles(PathBuf),
    /// A file or folder could not be opened or decoded.
    #[error("{}: cannot read: {message}", path.display())]
    Read {
        /// The file or folder.
        path: PathBuf,
        /// What went wrong.
        message: String,
    },
    /// A file was read but holds something the report cannot use.
    #[error("{}: {message}", path.display())]
    Invalid {
        /// The file.
        path: PathBuf,
        /// The row, column and value at fault.
        message: String,
    },
}
