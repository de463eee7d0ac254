//! Writing files so that no run leaves a half-written one: write under a
//! temporary name in the target's directory, then rename (atomic on one
//! file system). Temporary files are created private (0600); the published
//! file is made readable like any other output (0644).

use std::path::Path;

use tempfile::TempPath;

/// A temporary path beside `target`, removed again if dropped unpublished.
pub fn temporary_beside(target: &Path) -> std::io::Result<TempPath> {
    let directory = target.parent().filter(|p| !p.as_os_str().is_empty()).unwrap_or(Path::new("."));
    Ok(tempfile::Builder::new().prefix(".baroc-").suffix(".partial").tempfile_in(directory)?.into_temp_path())
}

/// Gives the finished temporary file its final name and ordinary permissions.
pub fn publish(temporary: TempPath, target: &Path) -> std::io::Result<()> {
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        std::fs::set_permissions(&temporary, std::fs::Permissions::from_mode(0o644))?;
    }
    temporary.persist(target).map_err(|e| e.error)
}

/// Writes bytes to `target` atomically.
pub fn write(target: &Path, bytes: &[u8]) -> std::io::Result<()> {
    let temporary = temporary_beside(target)?;
    {
        use std::io::Write;
        let mut file = std::fs::File::create(&temporary)?;
        file.write_all(bytes)?;
        file.sync_all()?;
    }
    publish(temporary, target)
}
