//! Output files are written to a temporary file in the same folder and
//! renamed into place, so a crash never leaves half a file, and an existing
//! file is only replaced when the user asked for it.

use std::io::Write;
use std::path::Path;

use crate::error::{CwError, Result};

/// Writes `bytes` to `path` atomically; refuses to replace a file unless `overwrite`.
pub fn write_atomic(path: &Path, bytes: &[u8], overwrite: bool) -> Result<()> {
    if path.exists() && !overwrite {
        return Err(CwError::output(
            path,
            "already exists; pass --force to replace it",
        ));
    }
    let dir = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p,
        _ => Path::new("."),
    };
    let mut tmp = tempfile::Builder::new()
        .prefix(".cwaudit-")
        .tempfile_in(dir)
        .map_err(|e| CwError::output(path, format!("cannot be written ({e})")))?;
    tmp.write_all(bytes)
        .and_then(|_| tmp.flush())
        .map_err(|e| CwError::output(path, format!("cannot be written ({e})")))?;
    // Outputs are ordinary files: readable by others like anything else the
    // user writes (the temporary file starts private).
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        let _ = std::fs::set_permissions(tmp.path(), std::fs::Permissions::from_mode(0o644));
    }
    let res = if overwrite {
        tmp.persist(path).map(|_| ())
    } else {
        tmp.persist_noclobber(path).map(|_| ())
    };
    res.map_err(|e| CwError::output(path, format!("cannot be written ({})", e.error)))
}

#[cfg(test)]
mod tests {
    use super::*;
    #[test]
    fn refuses_to_overwrite_and_leaves_no_temporary_file() {
        let d = tempfile::tempdir().unwrap();
        let p = d.path().join("a.csv");
        write_atomic(&p, b"one", false).unwrap();
        assert!(write_atomic(&p, b"two", false).is_err());
        assert_eq!(std::fs::read(&p).unwrap(), b"one");
        write_atomic(&p, b"three", true).unwrap();
        assert_eq!(std::fs::read(&p).unwrap(), b"three");
        assert_eq!(std::fs::read_dir(d.path()).unwrap().count(), 1);
    }
}
