//! Writing output files safely: never a partial file on disk.

use std::io::Write;
use std::path::Path;

/// Writes `contents` to `path` through a temporary file in the same folder (the `tempfile`
/// crate: a unique name, removed when the write fails or the process unwinds) and a rename, so
/// an interrupted run leaves either the old file or the complete new one. The temporary file is
/// named `.<name>.<random>.tmp`; [`remove_stale_temporaries`] clears those a killed run left.
pub fn write_atomic(path: &Path, contents: &[u8]) -> std::io::Result<()> {
    let dir = path
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    let name = path
        .file_name()
        .and_then(|n| n.to_str())
        .unwrap_or("output");
    let mut tmp = tempfile::Builder::new()
        .prefix(&format!(".{name}."))
        .suffix(".tmp")
        .tempfile_in(dir)?;
    tmp.write_all(contents)?;
    tmp.as_file().sync_all()?;
    tmp.persist(path).map_err(|e| e.error)?;
    Ok(())
}

/// Removes the temporary files that runs killed while writing `path` left beside it
/// (`.<name>.<random>.tmp`, and `.<name>.tmp-<pid>` from earlier versions). Returns how many.
pub fn remove_stale_temporaries(path: &Path) -> usize {
    let dir = path
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    let Some(name) = path.file_name().and_then(|n| n.to_str()) else {
        return 0;
    };
    let prefix = format!(".{name}.");
    let Ok(entries) = std::fs::read_dir(dir) else {
        return 0;
    };
    let mut n = 0;
    for e in entries.flatten() {
        let f = e.file_name();
        let Some(f) = f.to_str() else { continue };
        if f.starts_with(&prefix)
            && (f.ends_with(".tmp") || f[prefix.len()..].starts_with("tmp-"))
            && e.file_type().is_ok_and(|t| t.is_file())
            && std::fs::remove_file(e.path()).is_ok()
        {
            n += 1;
        }
    }
    n
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn an_atomic_write_leaves_only_the_file_and_stale_temporaries_are_cleared() {
        let d = tempfile::tempdir().unwrap();
        let p = d.path().join("t.csv");
        write_atomic(&p, b"one\n").unwrap();
        write_atomic(&p, b"two\n").unwrap();
        assert_eq!(std::fs::read(&p).unwrap(), b"two\n");
        let names: Vec<_> = std::fs::read_dir(d.path()).unwrap().flatten().collect();
        assert_eq!(names.len(), 1);
        std::fs::write(d.path().join(".t.csv.tmp-12345"), b"half").unwrap();
        std::fs::write(d.path().join(".t.csv.AbC123.tmp"), b"half").unwrap();
        std::fs::write(d.path().join(".other.csv.AbC123.tmp"), b"keep").unwrap();
        assert_eq!(remove_stale_temporaries(&p), 2);
        assert!(d.path().join(".other.csv.AbC123.tmp").exists());
    }
}
