//! Reading and writing files. Output is never half-written: every file is
//! written to a temporary sibling and renamed into place. Inputs are never
//! modified.

pub mod observations;
pub mod results;
pub mod scenario;

use std::fs;
use std::io::Write;
use std::path::{Path, PathBuf};

/// Errors from file input and output; each names the file.
#[derive(Debug, thiserror::Error)]
pub enum IoError {
    #[error("{path}: {source}")]
    Os { path: String, source: std::io::Error },
}

/// Writes `contents` to `path` atomically: a temporary file in the same
/// directory is written, flushed and renamed over the target, so a reader (or an
/// interrupted run) sees either the old file or the whole new one.
pub fn write_atomically(path: &Path, contents: &[u8]) -> Result<(), IoError> {
    let os = |source| IoError::Os { path: path.display().to_string(), source };
    let dir = path.parent().filter(|p| !p.as_os_str().is_empty()).unwrap_or(Path::new("."));
    fs::create_dir_all(dir).map_err(os)?;
    let name = path.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_else(|| "out".into());
    let tmp: PathBuf = dir.join(format!(".{name}.{}.tmp", std::process::id()));
    let result = (|| {
        let mut f = fs::File::create(&tmp)?;
        f.write_all(contents)?;
        f.sync_all()?;
        fs::rename(&tmp, path)
    })();
    if result.is_err() {
        let _ = fs::remove_file(&tmp);
    }
    result.map_err(os)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn atomic_write_replaces_whole_file_and_leaves_no_temporary() {
        let dir = std::env::temp_dir().join(format!("latens-io-test-{}", std::process::id()));
        let path = dir.join("a.txt");
        write_atomically(&path, b"first").unwrap();
        write_atomically(&path, b"second").unwrap();
        assert_eq!(fs::read(&path).unwrap(), b"second");
        let leftovers = fs::read_dir(&dir)
            .unwrap()
            .filter(|e| e.as_ref().unwrap().file_name().to_string_lossy().ends_with(".tmp"))
            .count();
        assert_eq!(leftovers, 0);
        fs::remove_dir_all(&dir).unwrap();
    }
}
