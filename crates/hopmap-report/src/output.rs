//! Writing output files safely: never a partial file on disk.

use std::io::Write;
use std::path::Path;

/// Writes `contents` to `path` through a temporary file in the same folder (the `tempfile`
/// crate: a unique name, removed when the write fails or the process unwinds) and a rename, so
/// an interrupted run leaves either the old file or the complete new one. The temporary file is
/// named `.<name>.<random>.tmp`; [`remove_stale_temporaries`] clears those a killed run left.
pub fn write_atomic(path: &Path, contents: &[u8]) -> std::io::Result<()> {
    write_atomic_with(path, |w| w.write_all(contents))
}

/// [`write_atomic`] for contents written through `body` (buffered). The file gets the usual
/// permissions of a new file (read and write as the process's umask allows), not the
/// owner-only mode of a temporary file.
pub fn write_atomic_with(
    path: &Path,
    body: impl FnOnce(&mut std::io::BufWriter<&std::fs::File>) -> std::io::Result<()>,
) -> std::io::Result<()> {
    let dir = path
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    let name = path
        .file_name()
        .and_then(|n| n.to_str())
        .unwrap_or("output");
    let prefix = format!(".{name}.");
    let mut builder = tempfile::Builder::new();
    builder.prefix(&prefix).suffix(".tmp");
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        builder.permissions(std::fs::Permissions::from_mode(0o666));
    }
    let tmp = builder.tempfile_in(dir)?;
    {
        let mut w = std::io::BufWriter::new(tmp.as_file());
        body(&mut w)?;
        w.flush()?;
    }
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

    /// A written file has the mode of any new file under the process's umask (0644 under the
    /// common 022), not the owner-only 0600 of a temporary file.
    #[cfg(target_os = "linux")]
    #[test]
    fn a_written_file_has_the_permissions_of_a_new_file() {
        use std::os::unix::fs::PermissionsExt;
        let status = std::fs::read_to_string("/proc/self/status").unwrap();
        let umask = status
            .lines()
            .find_map(|l| l.strip_prefix("Umask:"))
            .map(|v| u32::from_str_radix(v.trim(), 8).unwrap())
            .unwrap();
        let d = tempfile::tempdir().unwrap();
        let p = d.path().join("report.html");
        write_atomic(&p, b"<p>x</p>").unwrap();
        let mode = std::fs::metadata(&p).unwrap().permissions().mode() & 0o777;
        assert_eq!(mode, 0o666 & !umask, "mode {mode:o}, umask {umask:o}");
    }
}
