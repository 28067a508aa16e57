//! Atomic file writing: encode into `.NAME.tmp-PID-N` in the target folder, then rename.
//!
//! The temporary file sits in the same folder as the target, so the final rename never crosses
//! file systems. It is flushed and synced before the rename and removed on any failure, so a
//! file under the final name is always complete.

use std::ffi::OsString;
use std::fs::File;
use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};

use crate::error::{EncodeError, WriteError};

/// Distinguishes temporary files of concurrent writes within one process.
static TEMP_FILE_COUNTER: AtomicU64 = AtomicU64::new(0);

/// Removes the temporary file when dropped, unless it was renamed into place.
struct TempFileGuard {
    temp_path: PathBuf,
    renamed: bool,
}

impl Drop for TempFileGuard {
    fn drop(&mut self) {
        if !self.renamed {
            // Best effort: the original error is what the caller needs to see.
            let _ = std::fs::remove_file(&self.temp_path);
        }
    }
}

/// The temporary path used while writing `path`: `.NAME.tmp-PID-N` beside it.
fn temp_path_for(path: &Path) -> Result<PathBuf, WriteError> {
    let file_name = path.file_name().ok_or_else(|| WriteError::NotAFilePath {
        path: path.to_owned(),
    })?;
    let mut temp_name = OsString::from(".");
    temp_name.push(file_name);
    temp_name.push(format!(
        ".tmp-{}-{}",
        std::process::id(),
        TEMP_FILE_COUNTER.fetch_add(1, Ordering::Relaxed)
    ));
    Ok(match path.parent() {
        Some(parent) if !parent.as_os_str().is_empty() => parent.join(temp_name),
        _ => PathBuf::from(temp_name),
    })
}

/// Runs `encode` into a temporary file beside `path`, then renames it to `path`.
pub(crate) fn write_atomically<F>(path: &Path, encode: F) -> Result<(), WriteError>
where
    F: FnOnce(&mut BufWriter<File>) -> Result<(), EncodeError>,
{
    let temp_path = temp_path_for(path)?;
    let io_error = |action: String| {
        move |error: std::io::Error| WriteError::Io {
            path: path.to_owned(),
            action,
            error,
        }
    };
    let temp_display = temp_path.display().to_string();
    let file = File::create_new(&temp_path).map_err(io_error(format!(
        "cannot create temporary file {temp_display}"
    )))?;
    let mut guard = TempFileGuard {
        temp_path,
        renamed: false,
    };
    let mut writer = BufWriter::new(file);
    encode(&mut writer).map_err(|error| WriteError::Encode {
        path: path.to_owned(),
        error,
    })?;
    writer.flush().map_err(io_error(format!(
        "cannot write temporary file {temp_display}"
    )))?;
    let file = writer
        .into_inner()
        .map_err(|error| error.into_error())
        .map_err(io_error(format!(
            "cannot write temporary file {temp_display}"
        )))?;
    file.sync_all().map_err(io_error(format!(
        "cannot sync temporary file {temp_display}"
    )))?;
    drop(file);
    std::fs::rename(&guard.temp_path, path).map_err(io_error(format!(
        "cannot rename temporary file {temp_display} into place"
    )))?;
    guard.renamed = true;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn temp_name_sits_beside_the_target_and_is_hidden() {
        let temp = temp_path_for(Path::new("out/nodes.parquet")).unwrap();
        assert_eq!(temp.parent(), Some(Path::new("out")));
        let name = temp.file_name().unwrap().to_string_lossy().into_owned();
        assert!(name.starts_with(".nodes.parquet.tmp-"), "{name}");
        let bare = temp_path_for(Path::new("nodes.parquet")).unwrap();
        assert_eq!(bare.parent(), Some(Path::new("")));
        assert!(matches!(
            temp_path_for(Path::new("out/..")),
            Err(WriteError::NotAFilePath { .. })
        ));
    }

    #[test]
    fn failed_encoding_leaves_nothing_behind() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("table.parquet");
        let result = write_atomically(&path, |writer| {
            writer.write_all(b"half a file")?;
            Err(EncodeError::NoColumns)
        });
        assert!(matches!(result, Err(WriteError::Encode { .. })));
        assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 0);
    }

    #[test]
    fn rename_failure_leaves_nothing_behind() {
        let dir = tempfile::tempdir().unwrap();
        // The target is a non-empty folder, so the rename fails.
        let path = dir.path().join("taken");
        std::fs::create_dir(&path).unwrap();
        std::fs::write(path.join("keep"), b"x").unwrap();
        let error = write_atomically(&path, |writer| Ok(writer.write_all(b"data")?)).unwrap_err();
        assert!(error.to_string().contains("cannot rename"), "{error}");
        assert_eq!(error.path(), path);
        let names: Vec<_> = std::fs::read_dir(dir.path()).unwrap().collect();
        assert_eq!(names.len(), 1);
    }
}
