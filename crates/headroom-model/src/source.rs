//! Input files as text: I/O errors in plain words, the byte-order mark, UTF-8 with the line of
//! the first bad byte, byte offsets to lines, and "did you mean" hints for misspelt names.

use std::io;
use std::path::Path;

use crate::diagnostic::Diagnostic;

/// Why a file could not be read as text.
pub(crate) enum ReadFailure {
    /// The file does not exist (some files are optional).
    NotFound,
    /// Any other problem, already worded as an error on the file.
    Failed(Diagnostic),
}

/// Reads a whole file. A directory or an unreadable file is an error naming the file.
pub(crate) fn read_bytes(file: &Path) -> Result<Vec<u8>, ReadFailure> {
    match std::fs::read(file) {
        Ok(bytes) => Ok(bytes),
        Err(error) if error.kind() == io::ErrorKind::NotFound => Err(ReadFailure::NotFound),
        Err(error) => Err(ReadFailure::Failed(Diagnostic::error(
            file,
            format!("cannot read the file: {}", io_words(&error)),
        ))),
    }
}

/// An I/O error in plain words, without the OS error number.
pub(crate) fn io_words(error: &io::Error) -> String {
    match error.kind() {
        io::ErrorKind::NotFound => "not found".to_string(),
        io::ErrorKind::PermissionDenied => "permission denied".to_string(),
        io::ErrorKind::IsADirectory => "it is a folder, not a file".to_string(),
        _ => {
            let text = error.to_string();
            match text.find(" (os error") {
                Some(end) => text[..end].to_string(),
                None => text,
            }
        }
    }
}

/// Decodes UTF-8 text, dropping a leading byte-order mark. Invalid bytes become U+FFFD so that
/// reading can go on; the second value is then an error naming the line of the first bad byte.
pub(crate) fn decode_utf8(file: &Path, bytes: &[u8]) -> (String, Option<Diagnostic>) {
    let bytes = bytes.strip_prefix(b"\xEF\xBB\xBF").unwrap_or(bytes);
    match std::str::from_utf8(bytes) {
        Ok(text) => (text.to_string(), None),
        Err(error) => {
            let bad_at = error.valid_up_to();
            let line = line_of(bytes, bad_at);
            let diagnostic = Diagnostic::error(
                file,
                "the file is not UTF-8 text (first bad byte on this line); save it as UTF-8",
            )
            .at_line(line);
            (
                String::from_utf8_lossy(bytes).into_owned(),
                Some(diagnostic),
            )
        }
    }
}

/// The 1-based line holding byte `offset` of `text`.
pub(crate) fn line_of(text: &[u8], offset: usize) -> usize {
    let end = offset.min(text.len());
    1 + text[..end].iter().filter(|&&b| b == b'\n').count()
}

/// The known name closest to `word` when it is likely a misspelling of it: a few edits away
/// (case aside), or the start of it (`step` for `step_kw`).
pub(crate) fn closest<'a>(word: &str, known: &[&'a str]) -> Option<&'a str> {
    let word = word.to_lowercase();
    let limit = (word.chars().count() / 3).clamp(1, 3);
    let by_edits = known
        .iter()
        .map(|&name| (edit_distance(&word, &name.to_lowercase()), name))
        .filter(|&(distance, _)| distance <= limit)
        .min_by_key(|&(distance, _)| distance)
        .map(|(_, name)| name);
    by_edits.or_else(|| {
        let mut starting = known
            .iter()
            .filter(|name| word.chars().count() >= 3 && name.to_lowercase().starts_with(&word));
        match (starting.next(), starting.next()) {
            (Some(&name), None) => Some(name),
            _ => None,
        }
    })
}

/// Levenshtein distance over chars (insertions, deletions and substitutions cost 1).
fn edit_distance(a: &str, b: &str) -> usize {
    let b: Vec<char> = b.chars().collect();
    // One row of the dynamic-programming table, reused: row[j] = distance(a[..i], b[..j]).
    let mut row: Vec<usize> = (0..=b.len()).collect();
    for (i, ca) in a.chars().enumerate() {
        let mut diagonal = row[0];
        row[0] = i + 1;
        for (j, &cb) in b.iter().enumerate() {
            let above = row[j + 1];
            let substitution = diagonal + usize::from(ca != cb);
            row[j + 1] = substitution.min(above + 1).min(row[j] + 1);
            diagonal = above;
        }
    }
    row[b.len()]
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn line_of_counts_newlines_before_the_offset() {
        let text = b"a\nbc\nd";
        assert_eq!(line_of(text, 0), 1);
        assert_eq!(line_of(text, 2), 2);
        assert_eq!(line_of(text, 5), 3);
        assert_eq!(line_of(text, 99), 3);
    }

    #[test]
    fn decode_reports_the_line_of_the_first_bad_byte_and_goes_on() {
        let (text, error) = decode_utf8(Path::new("f.csv"), b"\xEF\xBB\xBFid\nok\nbad\xE9\n");
        assert_eq!(text, "id\nok\nbad\u{FFFD}\n");
        let error = error.unwrap();
        assert_eq!(error.line, Some(3));
        let (text, error) = decode_utf8(Path::new("f.csv"), "id\n\u{e9}\n".as_bytes());
        assert_eq!(text, "id\n\u{e9}\n");
        assert!(error.is_none());
    }

    #[test]
    fn closest_finds_misspellings_only() {
        let known = ["load_kw", "load_kvar", "gen_kw"];
        assert_eq!(closest("lod_kw", &known), Some("load_kw"));
        assert_eq!(closest("LOAD_KVAR", &known), Some("load_kvar"));
        assert_eq!(closest("owner", &known), None);
        assert_eq!(closest("ACSR5", &["ACSR50", "CU95"]), Some("ACSR50"));
        assert_eq!(closest("gen", &known), Some("gen_kw"));
        // Two names start with it: no guess.
        assert_eq!(closest("load", &known), None);
        assert_eq!(edit_distance("kitten", "sitting"), 3);
    }
}
