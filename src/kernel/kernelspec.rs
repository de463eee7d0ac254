//! Installing the kernel where Jupyter looks for kernels.
//!
//! A kernelspec is a folder `kernels/baroc/` under one of Jupyter's data
//! directories holding `kernel.json` (how to start the kernel) and the two
//! logos. Where the data directories are follows jupyter_core's documented
//! rules ("Jupyter's common directories"): `$JUPYTER_DATA_DIR` when set,
//! otherwise `$XDG_DATA_HOME/jupyter` or `~/.local/share/jupyter` on Linux
//! and other Unix, `~/Library/Jupyter` on macOS, `%APPDATA%\jupyter` on
//! Windows; `<prefix>/share/jupyter` for a prefix install.

use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::Command;

use serde_json::{json, Value};

use super::logo::logo_png;

/// The kernel's name: the folder under `kernels/` and the name users pick.
pub const KERNEL_NAME: &str = "baroc";

/// Name shown in the notebook's kernel menu unless the user picks another.
pub const DEFAULT_DISPLAY_NAME: &str = "Baroc";

/// Where to install.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum KernelspecLocation {
    /// The user's own Jupyter data directory.
    User,
    /// `<prefix>/share/jupyter/kernels` (a conda or venv prefix, /usr/local...).
    Prefix(PathBuf),
    /// The prefix of the active Python environment: `$VIRTUAL_ENV`,
    /// `$CONDA_PREFIX`, or else `sys.prefix` of `python3`.
    SysPrefix,
}

#[derive(Debug, thiserror::Error)]
pub enum KernelspecError {
    #[error("cannot find the home directory (HOME is not set); set JUPYTER_DATA_DIR or install with a prefix")]
    NoHome,
    #[error(
        "cannot find the Python environment's prefix: no VIRTUAL_ENV or CONDA_PREFIX is set and \
         `python3 -c 'import sys; print(sys.prefix)'` failed ({0}); activate the environment or \
         install with an explicit prefix"
    )]
    NoSysPrefix(String),
    #[error("cannot find the path of the running program ({0}); kernel.json needs it in argv")]
    NoExecutable(String),
    #[error("cannot write {path}: {reason}")]
    Write { path: PathBuf, reason: String },
    #[error("cannot remove {path}: {reason}")]
    Remove { path: PathBuf, reason: String },
}

/// Jupyter's per-user data directory, by jupyter_core's rules.
pub fn jupyter_data_dir() -> Result<PathBuf, KernelspecError> {
    if let Some(dir) = non_empty_env("JUPYTER_DATA_DIR") {
        return Ok(PathBuf::from(dir));
    }
    if cfg!(windows) {
        if let Some(appdata) = non_empty_env("APPDATA") {
            return Ok(PathBuf::from(appdata).join("jupyter"));
        }
        return Ok(home_dir()?.join(".jupyter").join("data"));
    }
    if cfg!(target_os = "macos") {
        return Ok(home_dir()?.join("Library").join("Jupyter"));
    }
    let data_home = match non_empty_env("XDG_DATA_HOME") {
        Some(dir) => PathBuf::from(dir),
        None => home_dir()?.join(".local").join("share"),
    };
    Ok(data_home.join("jupyter"))
}

fn non_empty_env(name: &str) -> Option<String> {
    std::env::var(name).ok().filter(|value| !value.is_empty())
}

fn home_dir() -> Result<PathBuf, KernelspecError> {
    let name = if cfg!(windows) { "USERPROFILE" } else { "HOME" };
    non_empty_env(name)
        .map(PathBuf::from)
        .ok_or(KernelspecError::NoHome)
}

fn sys_prefix() -> Result<PathBuf, KernelspecError> {
    for name in ["VIRTUAL_ENV", "CONDA_PREFIX"] {
        if let Some(prefix) = non_empty_env(name) {
            return Ok(PathBuf::from(prefix));
        }
    }
    let mut failures = Vec::new();
    for python in ["python3", "python"] {
        match Command::new(python)
            .args(["-c", "import sys; print(sys.prefix)"])
            .output()
        {
            Ok(output) if output.status.success() => {
                let prefix = String::from_utf8_lossy(&output.stdout).trim().to_string();
                if !prefix.is_empty() {
                    return Ok(PathBuf::from(prefix));
                }
                failures.push(format!("{python} printed nothing"));
            }
            Ok(output) => failures.push(format!("{python} exited with {}", output.status)),
            Err(error) => failures.push(format!("{python}: {error}")),
        }
    }
    Err(KernelspecError::NoSysPrefix(failures.join("; ")))
}

/// The folder holding Jupyter's kernelspecs for `location`.
pub fn kernels_dir(location: &KernelspecLocation) -> Result<PathBuf, KernelspecError> {
    Ok(match location {
        KernelspecLocation::User => jupyter_data_dir()?.join("kernels"),
        KernelspecLocation::Prefix(prefix) => prefix.join("share").join("jupyter").join("kernels"),
        KernelspecLocation::SysPrefix => {
            sys_prefix()?.join("share").join("jupyter").join("kernels")
        }
    })
}

/// The folder of the Baroc kernelspec for `location`.
pub fn kernelspec_dir(location: &KernelspecLocation) -> Result<PathBuf, KernelspecError> {
    kernelspec_dir_named(location, KERNEL_NAME)
}

/// The folder of a kernelspec called `name` for `location` (test doubles
/// install under their own name beside the real kernel).
pub fn kernelspec_dir_named(location: &KernelspecLocation, name: &str) -> Result<PathBuf, KernelspecError> {
    Ok(kernels_dir(location)?.join(name))
}

/// The content of kernel.json for a kernel started as `executable kernel
/// --connection-file <file>`.
pub fn kernel_json(executable: &Path, display_name: &str) -> Value {
    json!({
        "argv": [executable.to_string_lossy(), "kernel", "--connection-file", "{connection_file}"],
        "display_name": display_name,
        "language": KERNEL_NAME,
        // Interrupts arrive as interrupt_request on the control channel, so
        // they work the same on every platform and through remote gateways.
        "interrupt_mode": "message",
        "metadata": {"debugger": false},
    })
}

/// Install the kernelspec for the running program; returns its folder.
pub fn install_kernelspec(
    location: &KernelspecLocation,
    display_name: &str,
) -> Result<PathBuf, KernelspecError> {
    let executable = std::env::current_exe()
        .map_err(|error| KernelspecError::NoExecutable(error.to_string()))?;
    install_kernelspec_for(location, display_name, &executable)
}

/// Install a kernelspec that starts `executable`; returns its folder.
/// Each file is written to a temporary name and renamed into place, so a
/// reader never sees half a kernel.json.
pub fn install_kernelspec_for(
    location: &KernelspecLocation,
    display_name: &str,
    executable: &Path,
) -> Result<PathBuf, KernelspecError> {
    install_kernelspec_named(location, KERNEL_NAME, display_name, executable)
}

/// Install a kernelspec called `name` that starts `executable`.
pub fn install_kernelspec_named(
    location: &KernelspecLocation,
    name: &str,
    display_name: &str,
    executable: &Path,
) -> Result<PathBuf, KernelspecError> {
    let dir = kernelspec_dir_named(location, name)?;
    std::fs::create_dir_all(&dir).map_err(|error| KernelspecError::Write {
        path: dir.clone(),
        reason: error.to_string(),
    })?;
    let spec =
        serde_json::to_vec_pretty(&kernel_json(executable, display_name)).unwrap_or_default();
    write_atomically(&dir.join("kernel.json"), &spec)?;
    for size in [32u32, 64] {
        let path = dir.join(format!("logo-{size}x{size}.png"));
        let png = logo_png(size).map_err(|error| KernelspecError::Write {
            path: path.clone(),
            reason: format!("PNG encoding failed: {error}"),
        })?;
        write_atomically(&path, &png)?;
    }
    Ok(dir)
}

/// Remove the kernelspec from `location`; `Ok(None)` when none was there.
pub fn uninstall_kernelspec(
    location: &KernelspecLocation,
) -> Result<Option<PathBuf>, KernelspecError> {
    uninstall_kernelspec_named(location, KERNEL_NAME)
}

/// Remove the kernelspec called `name`, if installed there.
pub fn uninstall_kernelspec_named(
    location: &KernelspecLocation,
    name: &str,
) -> Result<Option<PathBuf>, KernelspecError> {
    let dir = kernelspec_dir_named(location, name)?;
    if !dir.join("kernel.json").exists() {
        return Ok(None);
    }
    for name in ["kernel.json", "logo-32x32.png", "logo-64x64.png"] {
        let path = dir.join(name);
        match std::fs::remove_file(&path) {
            Ok(()) => {}
            Err(error) if error.kind() == std::io::ErrorKind::NotFound => {}
            Err(error) => {
                return Err(KernelspecError::Remove {
                    path,
                    reason: error.to_string(),
                })
            }
        }
    }
    // Files someone else put there stay, and so does the folder then.
    let _ = std::fs::remove_dir(&dir);
    Ok(Some(dir))
}

fn write_atomically(path: &Path, bytes: &[u8]) -> Result<(), KernelspecError> {
    let failure = |reason: String| KernelspecError::Write {
        path: path.to_path_buf(),
        reason,
    };
    let dir = path.parent().unwrap_or_else(|| Path::new("."));
    let mut file =
        tempfile::NamedTempFile::new_in(dir).map_err(|error| failure(error.to_string()))?;
    file.write_all(bytes)
        .map_err(|error| failure(error.to_string()))?;
    // Temporary files start private (0600); a kernelspec is read by every
    // user of a shared prefix, like files Jupyter itself installs (0644).
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        file.as_file()
            .set_permissions(std::fs::Permissions::from_mode(0o644))
            .map_err(|error| failure(error.to_string()))?;
    }
    file.as_file()
        .sync_all()
        .map_err(|error| failure(error.to_string()))?;
    file.persist(path)
        .map_err(|error| failure(error.error.to_string()))?;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn prefix_install_writes_spec_and_logos_then_uninstalls() {
        let prefix = tempfile::tempdir().unwrap();
        let location = KernelspecLocation::Prefix(prefix.path().to_path_buf());
        let exe = Path::new("/opt/tools/bin/baroc");
        let dir = install_kernelspec_for(&location, "Baroc (test)", exe).unwrap();
        // Layout Jupyter searches: <prefix>/share/jupyter/kernels/<name>/kernel.json.
        assert_eq!(dir, prefix.path().join("share/jupyter/kernels/baroc"));
        let spec: Value =
            serde_json::from_slice(&std::fs::read(dir.join("kernel.json")).unwrap()).unwrap();
        assert_eq!(
            spec["argv"],
            json!([
                "/opt/tools/bin/baroc",
                "kernel",
                "--connection-file",
                "{connection_file}"
            ])
        );
        assert_eq!(spec["display_name"], "Baroc (test)");
        assert_eq!(spec["language"], "baroc");
        assert_eq!(spec["interrupt_mode"], "message");
        for name in ["logo-32x32.png", "logo-64x64.png"] {
            let bytes = std::fs::read(dir.join(name)).unwrap();
            // PNG signature, ISO/IEC 15948 section 5.2.
            assert_eq!(&bytes[..8], b"\x89PNG\r\n\x1a\n");
        }
        // No temporary files left behind.
        assert_eq!(std::fs::read_dir(&dir).unwrap().count(), 3);
        #[cfg(unix)]
        {
            use std::os::unix::fs::PermissionsExt;
            let mode = std::fs::metadata(dir.join("kernel.json"))
                .unwrap()
                .permissions()
                .mode();
            assert_eq!(mode & 0o777, 0o644);
        }

        assert_eq!(uninstall_kernelspec(&location).unwrap(), Some(dir.clone()));
        assert!(!dir.exists());
        assert_eq!(uninstall_kernelspec(&location).unwrap(), None);
    }
}
